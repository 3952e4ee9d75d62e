UPDATE sweep_results SET optimized = json_set(optimized, '$.nonlinear.simulated.peak_time', 'soon'), classical = json_set(classical, '$.second_order.overshoot_pct', 0);
