DROP TABLE sweep_points; CREATE TABLE sweep_points(idx, v1, v2, v3); INSERT INTO sweep_points VALUES (0,1,2,3);
