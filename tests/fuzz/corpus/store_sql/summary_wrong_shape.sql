UPDATE sweep_results SET optimized = '[1,2,3]', classical = '"text"';
