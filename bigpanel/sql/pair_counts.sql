-- Pair tables: the (weighted) rows per pair of levels of every pair of effects,
-- grouped on the integer codes of the final levels (one grouping set per pair;
-- the inner joins keep the rows that survived singleton removal).
CREATE OR REPLACE TEMP TABLE bp_pairs AS
SELECT {{codes}},
       GROUPING({{grouping}}) AS gid,
       {{weight}} AS nw
FROM bp_sample
{{joins}}
GROUP BY GROUPING SETS ({{sets}})
