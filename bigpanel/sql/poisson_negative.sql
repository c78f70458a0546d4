-- A negative outcome, if any (the Poisson fit needs y >= 0); stops at the first one.
SELECT v0 + $offset AS y FROM bp_sample WHERE v0 + $offset < 0 LIMIT 1
