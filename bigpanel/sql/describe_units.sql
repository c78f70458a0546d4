-- Describe pass 2: one row per unit, over the rows whose unit and period are
-- both present. The distinct periods are ranked densely in sorted order, so a
-- unit has a gap when its last rank - first rank + 1 exceeds its period count.
-- A (unit, period) cell with more than one row is a duplicated key. For every
-- numeric column, same_j says whether the unit's non-NULL (finite) values are
-- all equal (NULL when the unit has none).
CREATE OR REPLACE TEMP TABLE bp_units AS
WITH cells AS (
  SELECT u, t, count(*) AS n{{cell_ranges}}
  FROM bp_panel
  WHERE u IS NOT NULL AND t IS NOT NULL
  GROUP BY u, t
),
periods AS (
  SELECT t, dense_rank() OVER (ORDER BY t) AS r
  FROM (SELECT DISTINCT t FROM cells) AS d
)
SELECT c.u,
       sum(c.n) AS n_rows,
       count(*) AS n_periods,
       min(c.t) AS first_t,
       max(c.t) AS last_t,
       min(p.r) AS first_rank,
       max(p.r) AS last_rank,
       count(*) FILTER (WHERE c.n > 1) AS dup_keys,
       coalesce(sum(c.n) FILTER (WHERE c.n > 1), 0) AS dup_rows{{unit_flags}}
FROM cells AS c JOIN periods AS p ON c.t = p.t
GROUP BY c.u
