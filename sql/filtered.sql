-- Used columns under internal names, after the user's row filter.
-- The only statement that names user columns; each is a quoted identifier.
CREATE OR REPLACE TEMP VIEW bp_filtered AS
SELECT {{columns}}
FROM bp_source
WHERE {{where}}
