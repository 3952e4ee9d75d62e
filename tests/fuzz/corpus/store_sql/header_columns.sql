ALTER TABLE sweep_header RENAME COLUMN grid TO grid2;
