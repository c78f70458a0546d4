-- An effect nested in every cluster column: a cluster's demeaned cross-products
-- are the sums of the co-moments of the effect's levels inside it, for every
-- combination of cluster columns (grouping sets), with the cluster keys. The
-- table the cluster meat and the wild bootstrap read, made from per-level cells
-- (those of the reduction with one effect, else those of the nested-effect pass)
-- without a further pass over the rows.
CREATE OR REPLACE TEMP TABLE bp_cluster_moments AS
SELECT GROUPING({{clusters}}) AS gid,
       {{clusters}},
       sum(n) AS n,
       {{sums}}
FROM (SELECT c.n,
             {{values}}
      FROM {{cells}} AS c
      JOIN {{levels}} USING ({{keys}})
      WHERE c.gid = $gid) AS lv
GROUP BY GROUPING SETS ({{sets}})
