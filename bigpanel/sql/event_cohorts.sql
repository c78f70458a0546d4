-- Each first-treated date ranked among the periods: re is the number of observed
-- periods before it, so that the event time of a row is r - re (0 at the first
-- observed period on or after the first treated date).
CREATE OR REPLACE TEMP TABLE bp_event_cohorts AS
SELECT c.ft, CAST(count(p.f2_1) AS BIGINT) AS re
FROM (SELECT ft FROM bp_event_panel WHERE gid = $gid AND ft IS NOT NULL) AS c
LEFT JOIN bp_event_periods AS p ON p.f2_1 < c.ft
GROUP BY c.ft
