UPDATE sweep_results SET search_wall_time_s = 'slow', point_wall_time_s = -1e308;
