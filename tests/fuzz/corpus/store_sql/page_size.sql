PRAGMA page_size = 512;
