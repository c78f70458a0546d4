-- Used columns under internal names, after the user's row filter.
-- The only statement that names user columns; each is a quoted identifier.
-- A view over Parquet and tables; a table (parsed once) over CSV.
CREATE OR REPLACE TEMP {{kind}} bp_filtered AS
SELECT {{columns}}
FROM bp_source{{offsets}}
WHERE {{where}}
