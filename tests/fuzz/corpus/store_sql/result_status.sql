UPDATE sweep_results SET status = 'banana';
