UPDATE sweep_results SET optimized = '{not json';
