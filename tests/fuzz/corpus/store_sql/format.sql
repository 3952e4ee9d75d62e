UPDATE sweep_header SET format = 'specloop-sweep-1';
