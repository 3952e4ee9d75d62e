PRAGMA schema_version = 1; PRAGMA user_version = 3;
