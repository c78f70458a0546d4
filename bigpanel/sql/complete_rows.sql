-- Every row complete in the used columns, for an estimator that fits a part of them
-- (bp_sample) and reads the rest itself (the event study's treated rows).
CREATE OR REPLACE TEMP VIEW bp_complete AS
SELECT *
FROM bp_filtered
WHERE {{complete}}
