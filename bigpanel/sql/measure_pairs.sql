-- Before a multi-way reduction: the complete rows, HyperLogLog estimates of
-- the distinct levels of every effect and of the distinct pairs of levels of
-- every pair of effects (their ratio to the rows says whether pair tables would
-- compress the panel), and the compensated sums of products of the shifted
-- value columns (from which, with the solved effects, the demeaned
-- cross-products follow without another pass when no singleton is dropped).
SELECT count(*) AS n,
       {{estimates}}
FROM bp_sample CROSS JOIN bp_shift AS s
