UPDATE sweep_points SET idx = -1 WHERE idx = 0;
