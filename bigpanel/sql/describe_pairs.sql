-- The distinct pairs of levels of two effect columns that share a row, each
-- level coded densely from 0 in sorted order (the edges of the bipartite graph).
SELECT CAST(dense_rank() OVER (ORDER BY a) - 1 AS INTEGER) AS code_a,
       CAST(dense_rank() OVER (ORDER BY b) - 1 AS INTEGER) AS code_b
FROM (SELECT DISTINCT {{a}} AS a, {{b}} AS b
      FROM bp_panel
      WHERE {{a}} IS NOT NULL AND {{b}} IS NOT NULL) AS pairs
