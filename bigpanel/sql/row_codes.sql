-- The row-codes strategy: every sample row's integer level code of each effect
-- (and its weight), nothing else, the largest effect's code last; the projections
-- iterate on these in numpy, with the rows grouped by that code (in the order the
-- engine reads them, or sorted by it when that order does not group them). The
-- inner joins keep exactly the sample rows whose levels survived singleton removal.
SELECT {{codes}}
FROM bp_sample
{{joins}}{{order}}
