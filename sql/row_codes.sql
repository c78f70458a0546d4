-- The row-codes strategy: every sample row's integer level code of each effect
-- (and its weight), nothing else; the projections iterate on these in numpy.
-- The inner joins keep exactly the sample rows whose levels survived singleton removal.
SELECT {{codes}}
FROM bp_sample
{{joins}}
