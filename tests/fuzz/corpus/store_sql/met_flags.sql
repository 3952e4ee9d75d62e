UPDATE sweep_results SET met = 7, optimized_confirmed = 'x', classical_confirmed = NULL, judged_on = 'nonlinear';
