UPDATE sweep_axes SET definition = 'banana' WHERE axis = 2;
