-- The levels of one effect with a dense integer code in key order, the row
-- count and the total weight (the row count again when unweighted), as BIGINT
-- and DOUBLE (a 128-bit integer would reach numpy as Python objects, one by
-- one). The cells of the effect's grouping set hold one row per level.
CREATE OR REPLACE TEMP TABLE {{table}} AS
SELECT {{keys}},
       CAST(row_number() OVER (ORDER BY {{keys}}) - 1 AS INTEGER) AS code,
       CAST(n AS BIGINT) AS n,
       CAST(nw AS DOUBLE) AS nw
FROM bp_cells
WHERE gid = $gid AND n >= $min_count
