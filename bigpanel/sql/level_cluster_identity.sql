-- Errors clustered on the effect whose levels the cells hold: each level is one
-- cluster, so the per-cluster cross-products are the levels' co-moments, with
-- no grouping (as level_cluster_moments, for one cluster column).
CREATE OR REPLACE TEMP TABLE bp_cluster_moments AS
SELECT 0 AS gid,
       c.n,
       {{values}}
FROM {{cells}} AS c
JOIN {{levels}} USING ({{keys}})
WHERE c.gid = $gid
