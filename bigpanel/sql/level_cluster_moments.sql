-- One effect nested in every cluster column: a cluster's demeaned cross-products
-- are the sums of the co-moments of the levels inside it, for every combination
-- of cluster columns (grouping sets), with the cluster keys. The table the
-- cluster meat and the wild bootstrap read, made from the cells without a pass
-- over the rows.
CREATE OR REPLACE TEMP TABLE bp_cluster_moments AS
SELECT GROUPING({{clusters}}) AS gid,
       {{clusters}},
       sum(n) AS n,
       {{sums}}
FROM (SELECT c.n,
             {{values}}
      FROM bp_cells AS c
      JOIN bp_lev_1 USING ({{keys}})
      WHERE c.gid = $gid) AS lv
GROUP BY GROUPING SETS ({{sets}})
