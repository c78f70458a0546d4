-- The row-codes strategy: every sample row's integer level code of each effect
-- but the largest (and its weight), nothing else, ordered by the largest effect's
-- code; the projections iterate on these in numpy. The inner joins keep exactly
-- the sample rows whose levels survived singleton removal.
SELECT {{codes}}
FROM bp_sample
{{joins}}
ORDER BY {{order}}
