ALTER TABLE sweep_results DROP COLUMN optimized;
