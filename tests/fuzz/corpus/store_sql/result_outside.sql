UPDATE sweep_results SET idx = 1000 WHERE idx = 0;
