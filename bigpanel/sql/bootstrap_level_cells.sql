-- The wild bootstrap's per (cluster, level) sums of one effect, read from the cells
-- that pass 2 grouped by cluster and level (no raw row is read): the cluster key, the
-- level's code, its weight in the cluster and the sums of the shifted columns.
SELECT c.{{cluster}} AS cluster,
       l.code,
       c.nw,
       {{sums}}
FROM bp_cluster_cells AS c
JOIN {{levels}} AS l USING ({{keys}})
WHERE c.gid = $gid
