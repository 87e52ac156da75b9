"""CSV and Parquet files in and out: `calibrant import` and `calibrant export`."""
