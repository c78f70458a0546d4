-- PostgreSQL: column names and types of the source table, in table order.
SELECT column_name, data_type, udt_name, numeric_precision, numeric_scale
FROM information_schema.columns
WHERE table_schema = $schema AND table_name = $table
ORDER BY ordinal_position
