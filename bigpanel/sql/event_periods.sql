-- Date periods ranked: r is the number of observed periods before the period.
CREATE OR REPLACE TEMP TABLE bp_event_periods AS
SELECT f2_1, CAST(row_number() OVER (ORDER BY f2_1) - 1 AS BIGINT) AS r
FROM bp_event_panel
WHERE gid = $gid
