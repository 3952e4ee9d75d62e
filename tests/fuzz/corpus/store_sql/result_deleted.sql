DELETE FROM sweep_results WHERE idx = 2;
