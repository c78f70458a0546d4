-- Whether every kept level of one effect lies in a single value of a cluster column.
SELECT coalesce(bool_and(lo = hi), FALSE) AS nested
FROM (SELECT min(c.{{low}}) AS lo, max(c.{{high}}) AS hi
      FROM bp_cells AS c JOIN {{table}} USING ({{keys}})
      WHERE c.gid = $gid
      GROUP BY {{keys}}) AS lv
