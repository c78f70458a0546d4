-- Clustered fits with an effect nested in every cluster column: per level of
-- that effect, the sums, squares and products of the columns with every other
-- effect's solved levels taken off (u = t - a_2 - ...), and each cluster
-- column's value, in one pass over the rows. The nested effect's own level
-- cancels from a co-moment, so its (largest) table is never joined; its
-- singleton levels drop out when the cells are joined to its level table.
CREATE OR REPLACE TEMP TABLE bp_nested_cells AS
SELECT {{keys}},
       0 AS gid,
       count(*) AS n,
       {{sums}}
FROM (SELECT {{keys}}, {{columns}}
      FROM bp_sample CROSS JOIN bp_shift AS s
      {{joins}}) AS u
GROUP BY {{keys}}
