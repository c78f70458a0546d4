-- The levels of one effect with a dense integer code in key order, the row
-- count, and whether all its rows share one cluster value.
CREATE OR REPLACE TEMP TABLE {{table}} AS
SELECT {{keys}},
       CAST(row_number() OVER (ORDER BY {{keys}}) - 1 AS INTEGER) AS code,
       n,
       nested
FROM (SELECT {{keys}}, sum(n) AS n, min(cl_min) = max(cl_max) AS nested
      FROM bp_cells
      WHERE gid = $gid
      GROUP BY {{keys}}
      HAVING sum(n) >= $min_count) AS lv
