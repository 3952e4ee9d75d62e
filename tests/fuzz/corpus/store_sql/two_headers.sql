INSERT INTO sweep_header SELECT * FROM sweep_header;
