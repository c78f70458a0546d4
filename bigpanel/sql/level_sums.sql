-- Per level of one effect (in code order): the weighted sums and squares of the shifted
-- columns, from the cells of the grouping set that holds the effect (one row per level).
SELECT l.code, {{sums}}
FROM bp_cells AS c
JOIN {{table}} AS l USING ({{keys}})
WHERE c.gid = $gid
ORDER BY l.code
