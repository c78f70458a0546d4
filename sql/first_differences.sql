-- First differences within unit along the period order: a global dense rank of
-- the periods tells consecutive periods (step 1) from gaps (step > 1); one
-- window pass, kept as a table for the moment passes.
CREATE OR REPLACE TEMP TABLE bp_fd AS
WITH ranked AS (
  SELECT *, dense_rank() OVER (ORDER BY tm) AS tr
  FROM bp_sample
),
lagged AS (
  SELECT {{diffs}},
         tr - lag(tr) OVER by_unit AS step
  FROM ranked
  WINDOW by_unit AS (PARTITION BY {{keys}} ORDER BY tr)
)
SELECT * FROM lagged
