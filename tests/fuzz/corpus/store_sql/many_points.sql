INSERT INTO sweep_points SELECT idx + 4, v1, v2 FROM sweep_points; UPDATE sweep_header SET point_count = 8;
