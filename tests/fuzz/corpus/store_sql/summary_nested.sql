UPDATE sweep_results SET optimized = '{"controller": {"parallel": 3, "series": {"gain": "x"}}, "simulated": {"peak_time": 1e999}}';
