-- Copy a registered Arrow table (level effects) into a temporary table.
CREATE OR REPLACE TEMP TABLE {{table}} AS
SELECT * FROM {{view}}
