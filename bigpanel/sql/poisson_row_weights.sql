-- The row-codes path of the Poisson fit: every working row's level codes and working weight,
-- the largest effect's code last, in the engine's scan order (runs of rows of one level of
-- that effect on a panel stored unit by unit) or, when that order does not group them,
-- sorted by that code.
SELECT {{columns}}
FROM ({{rows}}) AS r{{order}}
