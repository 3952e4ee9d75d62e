PRAGMA writable_schema = ON; UPDATE sqlite_master SET rootpage = 1 WHERE name = 'sweep_results';
