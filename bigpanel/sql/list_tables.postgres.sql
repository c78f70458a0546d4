-- PostgreSQL: the tables and views the connection can see, outside the system
-- and temporary schemas.
SELECT table_schema, table_name
FROM information_schema.tables
WHERE table_schema NOT IN ('pg_catalog', 'information_schema')
  AND table_schema NOT LIKE 'pg\_temp\_%'
  AND table_schema NOT LIKE 'pg\_toast%'
ORDER BY table_schema, table_name
