DROP TABLE sweep_results;
