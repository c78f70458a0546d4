-- The levels of one effect with a dense integer code in key order, the row
-- count and the total weight (the row count again when unweighted), as BIGINT
-- and DOUBLE: a sum of counts is a 128-bit integer, which reaches numpy as
-- Python objects, one by one (0.4 s for 340,000 levels).
CREATE OR REPLACE TEMP TABLE {{table}} AS
SELECT {{keys}},
       CAST(row_number() OVER (ORDER BY {{keys}}) - 1 AS INTEGER) AS code,
       n,
       nw
FROM (SELECT {{keys}}, CAST(sum(n) AS BIGINT) AS n, CAST(sum(nw) AS DOUBLE) AS nw
      FROM bp_cells
      WHERE gid = $gid
      GROUP BY {{keys}}
      HAVING sum(n) >= $min_count) AS lv
