DELETE FROM sweep_points WHERE idx = 1;
