-- Sums over the kept levels of one effect, read from per-level cells: no pass
-- over the rows. With one effect, the demeaned cross-products as sums of the
-- per-level co-moments (sum of w t_i t_j minus s_i s_j / n_w, t the shifted
-- values); with more, the products of the shifted columns over the sample, or
-- the squares of the columns the nested-effect pass summed.
SELECT sum(c.n) AS n,
       {{sums}}
FROM {{cells}} AS c
JOIN {{levels}} USING ({{keys}})
WHERE c.gid = $gid
