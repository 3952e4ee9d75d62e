UPDATE sweep_results SET status = 'error', error = NULL;
