-- Pass 2: the group-level sufficient statistics. One scan groups the sample by
-- each effect (one effect) or by each pair of effects (two or more): row count
-- and the sums and squares of every shifted value column per cell, and each
-- cluster column's range per cell (to tell whether an effect is nested in it).
CREATE OR REPLACE TEMP TABLE bp_cells AS
SELECT {{keys}},
       GROUPING({{keys}}) AS gid,
       count(*) AS n,
       {{sums}}
FROM bp_sample CROSS JOIN bp_shift AS s{{filters}}
GROUP BY GROUPING SETS ({{sets}})
