-- Final pass: the cross-products of the demeaned columns, row by row, with
-- compensated sums.
SELECT count(*) AS n,
       {{sums}}
FROM bp_tilde
