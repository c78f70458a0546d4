-- Tables and views the connection sees (temporary ones and registered frames included) whose
-- name, schema.name or database.schema.name is $name.
SELECT database_name, schema_name, table_name FROM duckdb_tables()
WHERE $name IN (table_name, schema_name || '.' || table_name, database_name || '.' || schema_name || '.' || table_name)
UNION ALL
SELECT database_name, schema_name, view_name FROM duckdb_views()
WHERE NOT internal
  AND $name IN (view_name, schema_name || '.' || view_name, database_name || '.' || schema_name || '.' || view_name)
ORDER BY 1, 2, 3
