-- First differences within unit along the period rank of bp_periods: step 1
-- between consecutive periods, step > 1 across a gap; one window pass per
-- unit, kept as a table for the moment passes.
CREATE OR REPLACE TEMP TABLE bp_fd AS
WITH lagged AS (
  SELECT {{diffs}},
         tr - lag(tr) OVER by_unit AS step
  FROM bp_sample JOIN bp_periods USING (tm)
  WINDOW by_unit AS (PARTITION BY {{keys}} ORDER BY tr)
)
SELECT * FROM lagged
