UPDATE sweep_header SET point_count = 9223372036854775807;
