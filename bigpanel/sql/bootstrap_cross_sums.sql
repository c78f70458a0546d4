-- Per (bootstrap cluster, level of an effect that cuts across the clusters):
-- the (weighted) sums of the demeaned columns, one grouping set per such effect.
-- The solved effects are joined back to the rows as for bp_tilde; the level
-- tables give each level's integer code.
SELECT {{cluster}},
       {{codes}},
       GROUPING({{grouping}}) AS gid,
       {{sums}}
FROM (SELECT {{columns}}
      FROM bp_sample CROSS JOIN bp_shift AS s
      {{joins}}) AS t
GROUP BY GROUPING SETS ({{sets}})
