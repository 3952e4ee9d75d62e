UPDATE sweep_points SET idx = 99 WHERE idx = 3;
