-- Copy a small table, or a registered Arrow table, into a temporary table.
CREATE OR REPLACE TEMP TABLE {{table}} AS
SELECT * FROM {{view}}
