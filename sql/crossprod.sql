-- Final pass: the cross-products of the demeaned columns, row by row.
SELECT count(*) AS n,
       {{sums}}
FROM bp_tilde
