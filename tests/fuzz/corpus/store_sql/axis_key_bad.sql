UPDATE sweep_axes SET key = 'a b' WHERE axis = 1;
