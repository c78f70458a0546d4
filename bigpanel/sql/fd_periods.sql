-- First differences: the periods present in the sample, ranked (a small table),
-- so that consecutive periods are told from gaps without sorting the rows globally.
CREATE OR REPLACE TEMP TABLE bp_periods AS
SELECT tm, dense_rank() OVER (ORDER BY tm) AS tr
FROM (SELECT DISTINCT tm FROM bp_sample) AS p
