-- The levels of one effect with a dense integer code in key order and the row count.
CREATE OR REPLACE TEMP TABLE {{table}} AS
SELECT {{keys}},
       CAST(row_number() OVER (ORDER BY {{keys}}) - 1 AS INTEGER) AS code,
       n
FROM (SELECT {{keys}}, sum(n) AS n
      FROM bp_cells
      WHERE gid = $gid
      GROUP BY {{keys}}
      HAVING sum(n) >= $min_count) AS lv
