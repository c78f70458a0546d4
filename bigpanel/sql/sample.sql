-- The estimation sample: rows complete in every used column (listwise deletion).
CREATE OR REPLACE TEMP VIEW bp_sample AS
SELECT *
FROM bp_filtered
WHERE {{complete}}
