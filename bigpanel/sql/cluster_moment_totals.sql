-- The cross-products over the whole sample: the per-cluster sums of one
-- grouping set (one cluster column), added up.
SELECT sum(n) AS n,
       {{sums}}
FROM bp_cluster_moments
WHERE gid = $gid
