-- The units of the event study: how many, how many never treated, how many cohorts
-- (first-treated values), the units whose first-treated value is not one value for all
-- their rows (with one of them), and the complete and the treated rows.
SELECT count(*) AS units,
       sum(n) AS n,
       sum(n_treated) AS n_treated,
       sum(CASE WHEN n_ft = 0 THEN 1 ELSE 0 END) AS never_treated,
       count(DISTINCT ft_min) AS cohorts,
       sum(CASE WHEN ft_min <> ft_max OR (n_ft > 0 AND n_ft < n) THEN 1 ELSE 0 END) AS inconsistent,
       min(CASE WHEN ft_min <> ft_max OR (n_ft > 0 AND n_ft < n) THEN CAST(f1_1 AS VARCHAR) END) AS example
FROM bp_event_panel
WHERE gid = $gid
