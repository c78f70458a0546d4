-- The levels of one effect with a dense integer code in key order, the row
-- count, whether all its rows share one cluster value, and that value.
CREATE OR REPLACE TEMP TABLE {{table}} AS
SELECT {{keys}},
       CAST(row_number() OVER (ORDER BY {{keys}}) - 1 AS INTEGER) AS code,
       n,
       nested,
       cl_value
FROM (SELECT {{keys}}, sum(n) AS n, min(cl_min) = max(cl_max) AS nested, min(cl_min) AS cl_value
      FROM bp_cells
      WHERE gid = $gid
      GROUP BY {{keys}}
      HAVING sum(n) >= $min_count) AS lv
