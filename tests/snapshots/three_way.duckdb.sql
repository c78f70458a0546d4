-- params: {}
-- Bind the user's filter against the source's columns without reading a row.
SELECT count(*) AS n FROM (SELECT * FROM bp_source LIMIT 0) AS s WHERE (x1 > -2.5)
;
-- params: {}
-- Used columns under internal names, after the user's row filter.
-- The only statement that names user columns; each is a quoted identifier.
-- A view over Parquet and tables; a table (parsed once) over CSV.
CREATE OR REPLACE TEMP VIEW bp_filtered AS
SELECT CAST("y" AS DOUBLE) AS v0,
       CAST("x1" AS DOUBLE) AS v1,
       "shop id" AS f1_1,
       "week" AS f2_1,
       "item" AS f3_1,
       "region" AS cl1,
       "shop id" AS cl2,
       CAST("w" AS DOUBLE) AS w
FROM bp_source
WHERE (x1 > -2.5)
;
-- params: {}
-- The estimation sample: rows complete in every used column (listwise deletion).
CREATE OR REPLACE TEMP VIEW bp_sample AS
SELECT *
FROM bp_filtered
WHERE isfinite(v0) AND isfinite(v1) AND f1_1 IS NOT NULL AND f2_1 IS NOT NULL AND f3_1 IS NOT NULL AND cl1 IS NOT NULL AND cl2 IS NOT NULL AND isfinite(w) AND w > 0
;
-- params: {}
-- Rows after the user's filter (before listwise deletion).
SELECT count(*) AS n FROM bp_filtered
;
-- params: {}
-- Rows in the source before any filter.
SELECT count(*) AS n FROM bp_source
;
-- params: {}
-- The shifts: means of the first complete rows (at most 1,000; file order).
SELECT avg(v0) AS m0,
       avg(v1) AS m1
FROM (SELECT v0, v1 FROM bp_sample LIMIT 1000) AS head
;
-- params: {"m0": -0.043423, "m1": -0.0267064}
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
CREATE OR REPLACE TEMP TABLE bp_cells AS
SELECT f1_1, f2_1, f3_1,
       GROUPING(f1_1, f2_1, f3_1) AS gid,
       count(*) AS n,
       sum(w) AS nw,
       sum(w * (v0 - s.m0)) AS s0,
       sum(w * (v1 - s.m1)) AS s1,
       sum(w * (v0 - s.m0) * (v0 - s.m0)) AS q0,
       sum(w * (v1 - s.m1) * (v1 - s.m1)) AS q1,
       min(cl1) AS cl1_min,
       max(cl1) AS cl1_max,
       min(cl2) AS cl2_min,
       max(cl2) AS cl2_max
FROM bp_sample CROSS JOIN bp_shift AS s
GROUP BY GROUPING SETS ((f1_1), (f2_1), (f3_1))
;
-- params: {"gid": 3, "min_count": 1}
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
-- params: {"gid": 5, "min_count": 1}
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
-- params: {"gid": 6, "min_count": 1}
-- The levels of one effect with a dense integer code in key order, the row
-- count and the total weight (the row count again when unweighted), as BIGINT
-- and DOUBLE (a 128-bit integer would reach numpy as Python objects, one by
-- one). The cells of the effect's grouping set hold one row per level.
CREATE OR REPLACE TEMP TABLE bp_lev_3 AS
SELECT f3_1,
       CAST(row_number() OVER (ORDER BY f3_1) - 1 AS INTEGER) AS code,
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
-- How many levels of one effect hold a single row.
SELECT count(*) AS n_single FROM bp_lev_3 WHERE n = 1
;
-- params: {}
-- The levels of one effect in code order (keys or row counts).
SELECT nw, n FROM bp_lev_1 ORDER BY code
;
-- params: {"gid": 3}
-- Whether every kept level of one effect lies in a single value of a cluster column
-- (the cells of the effect's grouping set hold one row per level).
SELECT coalesce(bool_and(c.cl1_min = c.cl1_max), FALSE) AS nested
FROM bp_cells AS c JOIN bp_lev_1 USING (f1_1)
WHERE c.gid = $gid
;
-- params: {"gid": 3}
-- Whether every kept level of one effect lies in a single value of a cluster column
-- (the cells of the effect's grouping set hold one row per level).
SELECT coalesce(bool_and(c.cl2_min = c.cl2_max), FALSE) AS nested
FROM bp_cells AS c JOIN bp_lev_1 USING (f1_1)
WHERE c.gid = $gid
;
-- params: {}
-- The levels of one effect in code order (keys or row counts).
SELECT nw, n FROM bp_lev_2 ORDER BY code
;
-- params: {"gid": 5}
-- Whether every kept level of one effect lies in a single value of a cluster column
-- (the cells of the effect's grouping set hold one row per level).
SELECT coalesce(bool_and(c.cl1_min = c.cl1_max), FALSE) AS nested
FROM bp_cells AS c JOIN bp_lev_2 USING (f2_1)
WHERE c.gid = $gid
;
-- params: {"gid": 5}
-- Whether every kept level of one effect lies in a single value of a cluster column
-- (the cells of the effect's grouping set hold one row per level).
SELECT coalesce(bool_and(c.cl2_min = c.cl2_max), FALSE) AS nested
FROM bp_cells AS c JOIN bp_lev_2 USING (f2_1)
WHERE c.gid = $gid
;
-- params: {}
-- The levels of one effect in code order (keys or row counts).
SELECT nw, n FROM bp_lev_3 ORDER BY code
;
-- params: {"gid": 6}
-- Whether every kept level of one effect lies in a single value of a cluster column
-- (the cells of the effect's grouping set hold one row per level).
SELECT coalesce(bool_and(c.cl1_min = c.cl1_max), FALSE) AS nested
FROM bp_cells AS c JOIN bp_lev_3 USING (f3_1)
WHERE c.gid = $gid
;
-- params: {"gid": 6}
-- Whether every kept level of one effect lies in a single value of a cluster column
-- (the cells of the effect's grouping set hold one row per level).
SELECT coalesce(bool_and(c.cl2_min = c.cl2_max), FALSE) AS nested
FROM bp_cells AS c JOIN bp_lev_3 USING (f3_1)
WHERE c.gid = $gid
;
-- params: {"gid": 3}
-- Per level of one effect (in code order): the weighted sums and squares of the shifted
-- columns, from the cells of the grouping set that holds the effect (one row per level).
SELECT l.code, c.s0, c.s1, c.q0, c.q1
FROM bp_cells AS c
JOIN bp_lev_1 AS l USING (f1_1)
WHERE c.gid = $gid
ORDER BY l.code
;
-- params: {"gid": 5}
-- Per level of one effect (in code order): the weighted sums and squares of the shifted
-- columns, from the cells of the grouping set that holds the effect (one row per level).
SELECT l.code, c.s0, c.s1, c.q0, c.q1
FROM bp_cells AS c
JOIN bp_lev_2 AS l USING (f2_1)
WHERE c.gid = $gid
ORDER BY l.code
;
-- params: {"gid": 6}
-- Per level of one effect (in code order): the weighted sums and squares of the shifted
-- columns, from the cells of the grouping set that holds the effect (one row per level).
SELECT l.code, c.s0, c.s1, c.q0, c.q1
FROM bp_cells AS c
JOIN bp_lev_3 AS l USING (f3_1)
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
       l3.code AS c3,
       GROUPING(l1.code, l2.code, l3.code) AS gid,
       sum(w) AS nw
FROM bp_sample
JOIN bp_lev_1 AS l1 USING (f1_1)
JOIN bp_lev_2 AS l2 USING (f2_1)
JOIN bp_lev_3 AS l3 USING (f3_1)
GROUP BY GROUPING SETS ((l1.code, l2.code), (l1.code, l3.code), (l2.code, l3.code))
;
-- params: {"gid": 1}
-- One pair of effects from the pair tables: codes and weight, for numpy.
SELECT c1, c2, nw
FROM bp_pairs
WHERE gid = $gid
;
-- params: {"gid": 2}
-- One pair of effects from the pair tables: codes and weight, for numpy.
SELECT c1, c3, nw
FROM bp_pairs
WHERE gid = $gid
;
-- params: {"gid": 4}
-- One pair of effects from the pair tables: codes and weight, for numpy.
SELECT c2, c3, nw
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
-- The levels of one effect in code order (keys or row counts).
SELECT f3_1 FROM bp_lev_3 ORDER BY code
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
-- Copy a small table, or a registered Arrow table, into a temporary table.
CREATE OR REPLACE TEMP TABLE "bp_alpha_3" AS
SELECT * FROM "bp_alpha_3_arrow"
;
-- params: {}
-- The demeaned columns: each value minus its shift and the solved effects of
-- every dimension, joined back row by row (e0 is the outcome, ej regressor j).
CREATE OR REPLACE TEMP VIEW bp_tilde AS
SELECT v0 - s.m0 - a1.a0 - a2.a0 - a3.a0 AS e0,
       v1 - s.m1 - a1.a1 - a2.a1 - a3.a1 AS e1,
       cl1,
       cl2,
       w
FROM bp_sample CROSS JOIN bp_shift AS s
JOIN bp_alpha_1 AS a1 USING (f1_1)
JOIN bp_alpha_2 AS a2 USING (f2_1)
JOIN bp_alpha_3 AS a3 USING (f3_1)
;
-- params: {}
-- Final pass of a cluster-robust fit: the cross-products of the demeaned columns
-- summed per cluster (compensated sums), for every combination of cluster
-- columns (grouping sets), with the cluster keys, kept in the engine. The totals,
-- the cluster scores and the wild bootstrap's cells are read from this table, so
-- the errors need no further row pass.
CREATE OR REPLACE TEMP TABLE bp_cluster_moments AS
SELECT GROUPING(cl1, cl2) AS gid,
       cl1, cl2,
       count(*) AS n,
       fsum(w * e0 * e0) AS q_0_0,
       fsum(w * e0 * e1) AS q_0_1,
       fsum(w * e1 * e1) AS q_1_1
FROM bp_tilde
GROUP BY GROUPING SETS ((cl1), (cl2), (cl1, cl2))
;
-- params: {"gid": 1}
-- The cross-products over the whole sample: the per-cluster sums of one
-- grouping set (one cluster column), added up.
SELECT sum(n) AS n,
       fsum(q_0_0) AS q_0_0,
       fsum(q_0_1) AS q_0_1,
       fsum(q_1_1) AS q_1_1
FROM bp_cluster_moments
WHERE gid = $gid
;
-- params: {"r0_0": 1.0, "r0_1": -0.441666}
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
-- params: {}
-- The levels of one effect in code order (keys or row counts).
SELECT f1_1 FROM bp_lev_1 ORDER BY code
;
-- params: {}
-- The levels of one effect in code order (keys or row counts).
SELECT f2_1 FROM bp_lev_2 ORDER BY code
;
-- params: {}
-- The levels of one effect in code order (keys or row counts).
SELECT f3_1 FROM bp_lev_3 ORDER BY code
