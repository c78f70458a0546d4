-- Pass 2 of a fit the wild bootstrap follows, second half (no pass over the rows):
-- each effect's per-level cells added up over the clusters of bp_cluster_cells, in
-- the layout of pass 2 (a row of another effect's grouping set holds a NULL key of
-- this effect and is left out: sample keys are never NULL).
CREATE OR REPLACE TEMP TABLE bp_cells AS
SELECT *
FROM (SELECT {{keys}},
             GROUPING({{keys}}) AS gid,
             sum(n) AS n,
             {{sums}}
      FROM bp_cluster_cells
      GROUP BY GROUPING SETS ({{sets}})) AS c
WHERE {{complete}}
