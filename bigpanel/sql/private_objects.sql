-- Views, tables and macros of this connection (temporary ones included) whose names start
-- with $prefix: what a fit run in a caller's connection may have left behind.
SELECT view_name AS name FROM duckdb_views() WHERE starts_with(view_name, $prefix)
UNION ALL
SELECT table_name FROM duckdb_tables() WHERE starts_with(table_name, $prefix)
UNION ALL
SELECT function_name FROM duckdb_functions() WHERE starts_with(function_name, $prefix)
