-- The row-codes path of the Poisson fit: every working row's working weight (and, the first
-- time, its level codes), ordered by all the level codes, the largest effect's first, so
-- that every step returns the rows in the order of the codes kept in numpy (rows with the
-- same codes of every effect may trade places: they enter the sparse tables alike).
SELECT {{columns}}
FROM ({{rows}}) AS r
ORDER BY {{order}}
