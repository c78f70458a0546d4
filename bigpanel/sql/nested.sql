-- Whether every kept level of one effect lies in a single value of a cluster column
-- (the cells of the effect's grouping set hold one row per level).
SELECT coalesce(bool_and(c.{{low}} = c.{{high}}), FALSE) AS nested
FROM bp_cells AS c JOIN {{table}} USING ({{keys}})
WHERE c.gid = $gid
