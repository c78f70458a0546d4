-- How many units are observed in each number of distinct periods.
SELECT n_periods AS periods, count(*) AS units
FROM bp_units
GROUP BY n_periods
ORDER BY n_periods
