PRAGMA journal_mode = DELETE; INSERT INTO sweep_results SELECT * FROM sweep_results WHERE 0;
