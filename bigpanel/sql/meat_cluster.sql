-- Cluster-robust meat from the per-cluster cross-products of bp_cluster_moments:
-- the score of cluster c is g_c = X~_c'W y~_c - X~_c'W X~_c b (b from the one-row
-- table bp_coef), then the sum over the clusters of g_c g_c', for every
-- combination of cluster columns. Reads no raw row.
SELECT gid,
       count(*) AS n_clusters,
       {{sums}}
FROM (SELECT gid,
             {{scores}}
      FROM bp_cluster_moments CROSS JOIN bp_coef AS b) AS g
GROUP BY gid
ORDER BY gid
