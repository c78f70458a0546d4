-- A DuckDB database file, opened read-only.
ATTACH {{path}} AS bp_db (READ_ONLY)
