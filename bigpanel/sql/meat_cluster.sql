-- Cluster-robust meat from the per-cluster cross-products of bp_cluster_moments:
-- the score of cluster c for residual a is v_ca = Q_c r_a (r_a from the one-row
-- table bp_coef), then the sum over the clusters of the products of those
-- scores, for every combination of cluster columns. Reads no raw row.
SELECT gid,
       count(*) AS n_clusters,
       {{sums}}
FROM (SELECT gid,
             {{scores}}
      FROM bp_cluster_moments CROSS JOIN bp_coef AS b) AS g
GROUP BY gid
ORDER BY gid
