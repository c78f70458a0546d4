-- One effect: the demeaned cross-products as sums over the kept levels of the
-- per-level co-moments (sum of w t_i t_j minus s_i s_j / n_w, t the shifted
-- values), read from the cells: no pass over the rows.
SELECT sum(c.n) AS n,
       {{sums}}
FROM bp_cells AS c
JOIN bp_lev_1 USING ({{keys}})
WHERE c.gid = $gid
