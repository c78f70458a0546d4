-- Column names and physical types of every file of a Parquet glob (metadata only).
SELECT file_name, name, type FROM parquet_schema({{paths}}) WHERE name <> 'schema' ORDER BY file_name
