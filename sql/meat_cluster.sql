-- Cluster-robust meat: for every combination of cluster columns (grouping
-- sets), scores g_c = sum over the rows of cluster c of u x~, then the sum over
-- clusters of g_c g_c'. One scan serves every term of inclusion-exclusion.
SELECT gid,
       count(*) AS n_clusters,
       {{sums}}
FROM (SELECT GROUPING({{clusters}}) AS gid,
             {{scores}}
      FROM (SELECT {{clusters}}, {{resid}} AS u, {{carry}}
            FROM bp_tilde CROSS JOIN bp_coef AS b) AS r
      GROUP BY GROUPING SETS ({{sets}})) AS g
GROUP BY gid
ORDER BY gid
