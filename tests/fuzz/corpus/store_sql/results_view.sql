DROP TABLE sweep_results; CREATE VIEW sweep_results AS SELECT 1 AS idx;
