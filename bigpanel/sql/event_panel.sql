-- Event study, first pass over the complete rows: per unit its rows, treated rows and
-- the count and range of its first-treated values (one value for every row of a unit,
-- or none at all), and for date periods the periods and the cohorts (to rank them).
CREATE OR REPLACE TEMP TABLE bp_event_panel AS
SELECT {{keys}},
       GROUPING({{keys}}) AS gid,
       count(*) AS n,
       count(ft) AS n_ft,
       min(ft) AS ft_min,
       max(ft) AS ft_max,
       sum(CASE WHEN ft IS NOT NULL AND f2_1 >= ft THEN 1 ELSE 0 END) AS n_treated
FROM bp_complete
GROUP BY GROUPING SETS ({{sets}})
