-- The wild bootstrap's cells: the per-cluster cross-products of the demeaned
-- columns for the finest combination of cluster columns, as the cross-product
-- pass left them in bp_cluster_moments (no raw row is read).
SELECT {{clusters}},
       {{sums}}
FROM bp_cluster_moments
WHERE gid = $gid
