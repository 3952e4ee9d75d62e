PRAGMA writable_schema = ON; UPDATE sqlite_master SET sql = 'CREATE TABLE sweep_axes(' WHERE name = 'sweep_axes';
