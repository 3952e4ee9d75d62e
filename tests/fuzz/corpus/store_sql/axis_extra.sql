INSERT INTO sweep_axes VALUES (3, 'plant.delay', '0,1', 2);
