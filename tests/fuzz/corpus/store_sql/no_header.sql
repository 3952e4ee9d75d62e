DELETE FROM sweep_header;
