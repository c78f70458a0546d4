-- Pass 2: the per-level sufficient statistics. One scan groups the sample by
-- each effect (one grouping set per effect): row count, weight, the sums and
-- squares of every shifted value column (with one effect, also every product of
-- two of them), and each cluster column's range per level (to tell whether an
-- effect is nested in it).
CREATE OR REPLACE TEMP TABLE {{table}} AS
SELECT {{keys}},
       GROUPING({{keys}}) AS gid,
       count(*) AS n,
       {{sums}}
FROM bp_sample CROSS JOIN bp_shift AS s{{filters}}
GROUP BY GROUPING SETS ({{sets}})
