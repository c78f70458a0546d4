-- Cluster-robust meat: scores g_c = sum over the rows of cluster c of u x~,
-- then sum over clusters of g_c g_c'.
SELECT count(*) AS n_clusters,
       {{sums}}
FROM (SELECT {{scores}}
      FROM (SELECT cl, {{resid}} AS u, {{carry}}
            FROM bp_tilde CROSS JOIN bp_coef AS b) AS r
      GROUP BY cl) AS g
