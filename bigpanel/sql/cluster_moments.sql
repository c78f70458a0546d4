-- Final pass of a cluster-robust fit: the cross-products of the demeaned columns
-- summed per cluster (compensated sums), for every combination of cluster
-- columns (grouping sets), with the cluster keys, kept in the engine. The totals,
-- the cluster scores and the wild bootstrap's cells are read from this table, so
-- the errors need no further row pass.
CREATE OR REPLACE TEMP TABLE bp_cluster_moments AS
SELECT GROUPING({{clusters}}) AS gid,
       {{clusters}},
       count(*) AS n,
       {{sums}}
FROM bp_tilde
GROUP BY GROUPING SETS ({{sets}})
