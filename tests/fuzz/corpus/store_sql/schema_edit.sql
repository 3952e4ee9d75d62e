PRAGMA writable_schema = ON; UPDATE sqlite_master SET sql = replace(sql, 'REAL', 'TEXT') WHERE name = 'sweep_points'; PRAGMA writable_schema = OFF;
