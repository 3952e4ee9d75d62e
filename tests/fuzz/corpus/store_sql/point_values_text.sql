UPDATE sweep_points SET v1 = 'text', v2 = NULL;
