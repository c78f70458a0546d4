-- params: {}
-- Used columns under internal names, after the user's row filter.
-- The only statement that names user columns; each is a quoted identifier.
-- A view over Parquet and tables; a table (parsed once) over CSV.
CREATE OR REPLACE TEMP VIEW bp_filtered AS
SELECT CAST("y" AS DOUBLE) AS v0,
       CAST("select" AS DOUBLE) AS v1,
       "shop id" AS f1_1,
       "wk""" AS f2_1,
       "area" AS cl1
FROM bp_source
WHERE TRUE
;
-- params: {}
-- The estimation sample: rows complete in every used column (listwise deletion).
CREATE OR REPLACE TEMP VIEW bp_sample AS
SELECT *
FROM bp_filtered
WHERE isfinite(v0) AND isfinite(v1) AND f1_1 IS NOT NULL AND f2_1 IS NOT NULL AND cl1 IS NOT NULL
;
-- params: {}
-- Rows after the user's filter (before listwise deletion).
SELECT count(*) AS n FROM bp_filtered
;
-- params: {}
-- The shifts: means of the first complete rows (at most 1,000; file order).
SELECT avg(v0) AS m0,
       avg(v1) AS m1
FROM (SELECT v0, v1 FROM bp_sample LIMIT 1000) AS head
;
-- params: {"m0": 0.00377972, "m1": 0.0794713}
-- A one-row helper table of numbers bound as parameters (shifts, coefficients).
CREATE OR REPLACE TEMP TABLE bp_shift AS
SELECT CAST($m0 AS DOUBLE) AS m0,
       CAST($m1 AS DOUBLE) AS m1
;
-- params: {}
-- Pass 2: the per-level sufficient statistics. One scan groups the sample by
-- each effect (one grouping set per effect): row count, weight, the sums and
-- squares of every shifted value column (with one effect, also every product of
-- two of them), and each cluster column's range per level (to tell whether an
-- effect is nested in it).
CREATE OR REPLACE TEMP TABLE bp_cluster_cells AS
SELECT cl1, f1_1, f2_1,
       GROUPING(cl1, f1_1, f2_1) AS gid,
       count(*) AS n,
       count(*) AS nw,
       sum((v0 - s.m0)) AS s0,
       sum((v1 - s.m1)) AS s1,
       sum((v0 - s.m0) * (v0 - s.m0)) AS q0,
       sum((v1 - s.m1) * (v1 - s.m1)) AS q1,
       min(cl1) AS cl1_min,
       max(cl1) AS cl1_max
FROM bp_sample CROSS JOIN bp_shift AS s
GROUP BY GROUPING SETS ((cl1, f1_1), (cl1, f2_1))
;
-- params: {"gid0": 1, "gid1": 2}
-- Pass 2 of a fit the wild bootstrap follows, second half (no pass over the rows):
-- each effect's per-level cells added up over the clusters of bp_cluster_cells, in
-- the layout of pass 2 (a row of another effect's grouping set holds a NULL key of
-- this effect and is left out: sample keys are never NULL).
CREATE OR REPLACE TEMP TABLE bp_cells AS
SELECT *
FROM (SELECT f1_1, f2_1,
             GROUPING(f1_1, f2_1) AS gid,
             sum(n) AS n,
             sum(nw) AS nw,
       sum(s0) AS s0,
       sum(s1) AS s1,
       sum(q0) AS q0,
       sum(q1) AS q1,
       min(cl1_min) AS cl1_min,
       max(cl1_max) AS cl1_max
      FROM bp_cluster_cells
      GROUP BY GROUPING SETS ((f1_1), (f2_1))) AS c
WHERE (gid = $gid0 AND f1_1 IS NOT NULL) OR (gid = $gid1 AND f2_1 IS NOT NULL)
;
-- params: {"gid": 1, "min_count": 1}
-- The levels of one effect with a dense integer code in key order, the row
-- count and the total weight (the row count again when unweighted), as BIGINT
-- and DOUBLE (a 128-bit integer would reach numpy as Python objects, one by
-- one). The cells of the effect's grouping set hold one row per level.
CREATE OR REPLACE TEMP TABLE bp_lev_1 AS
SELECT f1_1,
       CAST(row_number() OVER (ORDER BY f1_1) - 1 AS INTEGER) AS code,
       CAST(n AS BIGINT) AS n,
       CAST(nw AS DOUBLE) AS nw
FROM bp_cells
WHERE gid = $gid AND n >= $min_count
;
-- params: {"gid": 2, "min_count": 1}
-- The levels of one effect with a dense integer code in key order, the row
-- count and the total weight (the row count again when unweighted), as BIGINT
-- and DOUBLE (a 128-bit integer would reach numpy as Python objects, one by
-- one). The cells of the effect's grouping set hold one row per level.
CREATE OR REPLACE TEMP TABLE bp_lev_2 AS
SELECT f2_1,
       CAST(row_number() OVER (ORDER BY f2_1) - 1 AS INTEGER) AS code,
       CAST(n AS BIGINT) AS n,
       CAST(nw AS DOUBLE) AS nw
FROM bp_cells
WHERE gid = $gid AND n >= $min_count
;
-- params: {}
-- Rows covered by the levels of one effect.
SELECT sum(n) AS n FROM bp_lev_1
;
-- params: {}
-- How many levels of one effect hold a single row.
SELECT count(*) AS n_single FROM bp_lev_1 WHERE n = 1
;
-- params: {}
-- How many levels of one effect hold a single row.
SELECT count(*) AS n_single FROM bp_lev_2 WHERE n = 1
;
-- params: {}
-- The levels of one effect in code order (keys or row counts).
SELECT nw, n FROM bp_lev_1 ORDER BY code
;
-- params: {"gid": 1}
-- Whether every kept level of one effect lies in a single value of a cluster column
-- (the cells of the effect's grouping set hold one row per level).
SELECT coalesce(bool_and(c.cl1_min = c.cl1_max), FALSE) AS nested
FROM bp_cells AS c JOIN bp_lev_1 USING (f1_1)
WHERE c.gid = $gid
;
-- params: {}
-- The levels of one effect in code order (keys or row counts).
SELECT nw, n FROM bp_lev_2 ORDER BY code
;
-- params: {"gid": 2}
-- Whether every kept level of one effect lies in a single value of a cluster column
-- (the cells of the effect's grouping set hold one row per level).
SELECT coalesce(bool_and(c.cl1_min = c.cl1_max), FALSE) AS nested
FROM bp_cells AS c JOIN bp_lev_2 USING (f2_1)
WHERE c.gid = $gid
;
-- params: {"gid": 1}
-- Per level of one effect (in code order): the weighted sums and squares of the shifted
-- columns, from the cells of the grouping set that holds the effect (one row per level).
SELECT l.code, c.s0, c.s1, c.q0, c.q1
FROM bp_cells AS c
JOIN bp_lev_1 AS l USING (f1_1)
WHERE c.gid = $gid
ORDER BY l.code
;
-- params: {"gid": 2}
-- Per level of one effect (in code order): the weighted sums and squares of the shifted
-- columns, from the cells of the grouping set that holds the effect (one row per level).
SELECT l.code, c.s0, c.s1, c.q0, c.q1
FROM bp_cells AS c
JOIN bp_lev_2 AS l USING (f2_1)
WHERE c.gid = $gid
ORDER BY l.code
;
-- params: {}
-- Pair tables: the (weighted) rows per pair of levels of every pair of effects,
-- grouped on the integer codes of the final levels (one grouping set per pair;
-- the inner joins keep the rows that survived singleton removal).
CREATE OR REPLACE TEMP TABLE bp_pairs AS
SELECT l1.code AS c1,
       l2.code AS c2,
       GROUPING(l1.code, l2.code) AS gid,
       count(*) AS nw
FROM bp_sample
JOIN bp_lev_1 AS l1 USING (f1_1)
JOIN bp_lev_2 AS l2 USING (f2_1)
GROUP BY GROUPING SETS ((l1.code, l2.code))
;
-- params: {"gid": 0}
-- One pair of effects from the pair tables: codes and weight, for numpy.
SELECT c1, c2, nw
FROM bp_pairs
WHERE gid = $gid
;
-- params: {}
-- The levels of one effect in code order (keys or row counts).
SELECT f1_1 FROM bp_lev_1 ORDER BY code
;
-- params: {}
-- The levels of one effect in code order (keys or row counts).
SELECT f2_1 FROM bp_lev_2 ORDER BY code
;
-- params: {}
-- Copy a small table, or a registered Arrow table, into a temporary table.
CREATE OR REPLACE TEMP TABLE "bp_alpha_1" AS
SELECT * FROM "bp_alpha_1_arrow"
;
-- params: {}
-- Copy a small table, or a registered Arrow table, into a temporary table.
CREATE OR REPLACE TEMP TABLE "bp_alpha_2" AS
SELECT * FROM "bp_alpha_2_arrow"
;
-- params: {}
-- Clustered fits with an effect nested in every cluster column: per level of
-- that effect, the sums, squares and products of the columns with every other
-- effect's solved levels taken off (u = t - a_2 - ...), and each cluster
-- column's value, in one pass over the rows. The nested effect's own level
-- cancels from a co-moment, so its (largest) table is never joined; its
-- singleton levels drop out when the cells are joined to its level table.
CREATE OR REPLACE TEMP TABLE bp_nested_cells AS
SELECT f1_1,
       0 AS gid,
       count(*) AS n,
       count(*) AS nw,
       sum(u0) AS s0,
       sum(u1) AS s1,
       sum(u0 * u0) AS q0,
       sum(u1 * u1) AS q1,
       sum(u0 * u1) AS p0_1,
       min(cl1) AS cl1_min,
       max(cl1) AS cl1_max
FROM (SELECT f1_1, v0 - s.m0 - a2.a0 AS u0,
       v1 - s.m1 - a2.a1 AS u1,
       cl1
      FROM bp_sample CROSS JOIN bp_shift AS s
      JOIN bp_alpha_2 AS a2 USING (f2_1)) AS u
GROUP BY f1_1
;
-- params: {"gid": 0}
-- An effect nested in every cluster column: a cluster's demeaned cross-products
-- are the sums of the co-moments of the effect's levels inside it, for every
-- combination of cluster columns (grouping sets), with the cluster keys. The
-- table the cluster meat and the wild bootstrap read, made from per-level cells
-- (those of the reduction with one effect, else those of the nested-effect pass)
-- without a further pass over the rows.
CREATE OR REPLACE TEMP TABLE bp_cluster_moments AS
SELECT GROUPING(cl1) AS gid,
       cl1,
       sum(n) AS n,
       fsum(m_0_0) AS q_0_0,
       fsum(m_0_1) AS q_0_1,
       fsum(m_1_1) AS q_1_1
FROM (SELECT c.n,
             c.cl1_min AS cl1,
       c.q0 - c.s0 * c.s0 / c.nw AS m_0_0,
       c.p0_1 - c.s0 * c.s1 / c.nw AS m_0_1,
       c.q1 - c.s1 * c.s1 / c.nw AS m_1_1
      FROM bp_nested_cells AS c
      JOIN bp_lev_1 USING (f1_1)
      WHERE c.gid = $gid) AS lv
GROUP BY GROUPING SETS ((cl1))
;
-- params: {"gid": 0}
-- The cross-products over the whole sample: the per-cluster sums of one
-- grouping set (one cluster column), added up.
SELECT sum(n) AS n,
       fsum(q_0_0) AS q_0_0,
       fsum(q_0_1) AS q_0_1,
       fsum(q_1_1) AS q_1_1
FROM bp_cluster_moments
WHERE gid = $gid
;
-- params: {"gid": 0}
-- Sums over the kept levels of one effect, read from per-level cells: no pass
-- over the rows. With one effect, the demeaned cross-products as sums of the
-- per-level co-moments (sum of w t_i t_j minus s_i s_j / n_w, t the shifted
-- values); with more, the products of the shifted columns over the sample, or
-- the squares of the columns the nested-effect pass summed.
SELECT sum(c.n) AS n,
       fsum(c.q0) AS q0,
       fsum(c.q1) AS q1
FROM bp_nested_cells AS c
JOIN bp_lev_1 USING (f1_1)
WHERE c.gid = $gid
;
-- params: {"r0_0": 1.0, "r0_1": -0.212453}
-- A one-row helper table of numbers bound as parameters (shifts, coefficients).
CREATE OR REPLACE TEMP TABLE bp_coef AS
SELECT CAST($r0_0 AS DOUBLE) AS r0_0,
       CAST($r0_1 AS DOUBLE) AS r0_1
;
-- params: {}
-- Cluster-robust meat from the per-cluster cross-products of bp_cluster_moments:
-- the score of cluster c for residual a is v_ca = Q_c r_a (r_a from the one-row
-- table bp_coef), then the sum over the clusters of the products of those
-- scores, for every combination of cluster columns. Reads no raw row.
SELECT gid,
       count(*) AS n_clusters,
       fsum(g0_0 * g0_0) AS h_0_0_0_0
FROM (SELECT gid,
             b.r0_0 * q_0_1 + b.r0_1 * q_1_1 AS g0_0
      FROM bp_cluster_moments CROSS JOIN bp_coef AS b) AS g
GROUP BY gid
ORDER BY gid
;
-- params: {"gid": 0}
-- The wild bootstrap's cells: the per-cluster cross-products of the demeaned
-- columns for the finest combination of cluster columns, as the cross-product
-- pass left them in bp_cluster_moments (no raw row is read).
SELECT cl1,
       q_0_0,
       q_0_1,
       q_1_1
FROM bp_cluster_moments
WHERE gid = $gid
;
-- params: {"gid": 2}
-- The wild bootstrap's per (cluster, level) sums of one effect, read from the cells
-- that pass 2 grouped by cluster and level (no raw row is read): the cluster key, the
-- level's code, its weight in the cluster and the sums of the shifted columns.
SELECT c.cl1 AS cluster,
       l.code,
       c.nw,
       c.s0,
       c.s1
FROM bp_cluster_cells AS c
JOIN bp_lev_2 AS l USING (f2_1)
WHERE c.gid = $gid
;
-- params: {"gid": 1}
-- The wild bootstrap's per (cluster, level) sums of one effect, read from the cells
-- that pass 2 grouped by cluster and level (no raw row is read): the cluster key, the
-- level's code, its weight in the cluster and the sums of the shifted columns.
SELECT c.cl1 AS cluster,
       l.code,
       c.nw,
       c.s0,
       c.s1
FROM bp_cluster_cells AS c
JOIN bp_lev_1 AS l USING (f1_1)
WHERE c.gid = $gid
;
-- params: {}
-- The levels of one effect in code order (keys or row counts).
SELECT f1_1 FROM bp_lev_1 ORDER BY code
;
-- params: {}
-- The levels of one effect in code order (keys or row counts).
SELECT f2_1 FROM bp_lev_2 ORDER BY code
