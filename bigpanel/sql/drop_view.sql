-- Drop a view of this session before the tables under it are replaced (PostgreSQL refuses to
-- drop a table a view depends on).
DROP VIEW IF EXISTS {{view}}
