-- PostgreSQL: the panel as a view over a table of the connected database
-- (schema-qualified, each part a quoted identifier).
CREATE OR REPLACE TEMP VIEW bp_source AS
SELECT * FROM {{table}}
