UPDATE sweep_axes SET key = NULL;
