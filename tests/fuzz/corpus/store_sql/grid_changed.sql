UPDATE sweep_header SET grid = 'plant.gain=2,5';
