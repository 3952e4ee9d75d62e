DROP TABLE sweep_points; CREATE TABLE sweep_points(idx INTEGER PRIMARY KEY, v1 REAL);
