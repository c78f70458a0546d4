-- One grouping set of the cells with integer level codes, for numpy.
SELECT {{codes}}, {{sums}}
FROM bp_cells AS c
{{joins}}
WHERE c.gid = $gid
ORDER BY {{order}}
