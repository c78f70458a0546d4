-- The levels of one effect with a dense integer code in key order, the row
-- count and the total weight (the row count again when unweighted).
CREATE OR REPLACE TEMP TABLE {{table}} AS
SELECT {{keys}},
       CAST(row_number() OVER (ORDER BY {{keys}}) - 1 AS INTEGER) AS code,
       n,
       nw
FROM (SELECT {{keys}}, sum(n) AS n, sum(nw) AS nw
      FROM bp_cells
      WHERE gid = $gid
      GROUP BY {{keys}}
      HAVING sum(n) >= $min_count) AS lv
