UPDATE sweep_results SET binding = 'requirements.nothing', evaluations = 99999999999;
