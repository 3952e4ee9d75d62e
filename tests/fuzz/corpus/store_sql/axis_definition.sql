UPDATE sweep_axes SET definition = '1:2:1000000' WHERE axis = 1;
