-- params: {}
CREATE OR REPLACE TEMPORARY VIEW bp_filtered AS SELECT CAST("y" AS DOUBLE PRECISION) AS v0, CAST("select" AS DOUBLE PRECISION) AS v1, "shop id" AS f1_1, "wk""" AS f2_1, "area" AS cl1 FROM bp_source WHERE TRUE
;
-- params: {}
CREATE OR REPLACE TEMPORARY VIEW bp_sample AS SELECT * FROM bp_filtered WHERE (NOT v0 IN (CAST('Infinity' AS DOUBLE PRECISION), CAST('-Infinity' AS DOUBLE PRECISION), CAST('NaN' AS DOUBLE PRECISION))) AND (NOT v1 IN (CAST('Infinity' AS DOUBLE PRECISION), CAST('-Infinity' AS DOUBLE PRECISION), CAST('NaN' AS DOUBLE PRECISION))) AND NOT f1_1 IS NULL AND NOT f2_1 IS NULL AND NOT cl1 IS NULL
;
-- params: {}
SELECT COUNT(*) AS n FROM bp_filtered
;
-- params: {}
SELECT AVG(v0) AS m0, AVG(v1) AS m1 FROM (SELECT v0, v1 FROM bp_sample LIMIT 1000) AS head
;
-- params: {"m0": 0.00377972, "m1": 0.0794713}
DROP TABLE IF EXISTS bp_shift
;
CREATE TEMPORARY TABLE bp_shift AS SELECT CAST(%(m0)s AS DOUBLE PRECISION) AS m0, CAST(%(m1)s AS DOUBLE PRECISION) AS m1
;
-- params: {}
DROP TABLE IF EXISTS bp_cluster_cells
;
CREATE TEMPORARY TABLE bp_cluster_cells AS SELECT cl1, f1_1, f2_1, GROUPING(cl1, f1_1, f2_1) AS gid, COUNT(*) AS n, COUNT(*) AS nw, SUM((v0 - s.m0)) AS s0, SUM((v1 - s.m1)) AS s1, SUM((v0 - s.m0) * (v0 - s.m0)) AS q0, SUM((v1 - s.m1) * (v1 - s.m1)) AS q1, MIN(cl1) AS cl1_min, MAX(cl1) AS cl1_max FROM bp_sample CROSS JOIN bp_shift AS s GROUP BY GROUPING SETS ((cl1, f1_1), (cl1, f2_1))
;
-- params: {"gid0": 1, "gid1": 2}
DROP TABLE IF EXISTS bp_cells
;
CREATE TEMPORARY TABLE bp_cells AS SELECT * FROM (SELECT f1_1, f2_1, GROUPING(f1_1, f2_1) AS gid, SUM(n) AS n, SUM(nw) AS nw, SUM(s0) AS s0, SUM(s1) AS s1, SUM(q0) AS q0, SUM(q1) AS q1, MIN(cl1_min) AS cl1_min, MAX(cl1_max) AS cl1_max FROM bp_cluster_cells GROUP BY GROUPING SETS ((f1_1), (f2_1))) AS c WHERE (gid = %(gid0)s AND NOT f1_1 IS NULL) OR (gid = %(gid1)s AND NOT f2_1 IS NULL)
;
-- params: {"gid": 1, "min_count": 1}
DROP TABLE IF EXISTS bp_lev_1
;
CREATE TEMPORARY TABLE bp_lev_1 AS SELECT f1_1, CAST(ROW_NUMBER() OVER (ORDER BY f1_1) - 1 AS INT) AS code, CAST(n AS BIGINT) AS n, CAST(nw AS DOUBLE PRECISION) AS nw FROM bp_cells WHERE gid = %(gid)s AND n >= %(min_count)s
;
-- params: {"gid": 2, "min_count": 1}
DROP TABLE IF EXISTS bp_lev_2
;
CREATE TEMPORARY TABLE bp_lev_2 AS SELECT f2_1, CAST(ROW_NUMBER() OVER (ORDER BY f2_1) - 1 AS INT) AS code, CAST(n AS BIGINT) AS n, CAST(nw AS DOUBLE PRECISION) AS nw FROM bp_cells WHERE gid = %(gid)s AND n >= %(min_count)s
;
-- params: {}
SELECT SUM(n) AS n FROM bp_lev_1
;
-- params: {}
SELECT COUNT(*) AS n_single FROM bp_lev_1 WHERE n = 1
;
-- params: {}
SELECT COUNT(*) AS n_single FROM bp_lev_2 WHERE n = 1
;
-- params: {}
SELECT nw, n FROM bp_lev_1 ORDER BY code
;
-- params: {"gid": 1}
SELECT COALESCE(BOOL_AND(c.cl1_min = c.cl1_max), FALSE) AS nested FROM bp_cells AS c JOIN bp_lev_1 USING (f1_1) WHERE c.gid = %(gid)s
;
-- params: {}
SELECT nw, n FROM bp_lev_2 ORDER BY code
;
-- params: {"gid": 2}
SELECT COALESCE(BOOL_AND(c.cl1_min = c.cl1_max), FALSE) AS nested FROM bp_cells AS c JOIN bp_lev_2 USING (f2_1) WHERE c.gid = %(gid)s
;
-- params: {"gid": 1}
SELECT l.code, c.s0, c.s1, c.q0, c.q1 FROM bp_cells AS c JOIN bp_lev_1 AS l USING (f1_1) WHERE c.gid = %(gid)s ORDER BY l.code
;
-- params: {"gid": 2}
SELECT l.code, c.s0, c.s1, c.q0, c.q1 FROM bp_cells AS c JOIN bp_lev_2 AS l USING (f2_1) WHERE c.gid = %(gid)s ORDER BY l.code
;
-- params: {}
DROP TABLE IF EXISTS bp_pairs
;
CREATE TEMPORARY TABLE bp_pairs AS SELECT l1.code AS c1, l2.code AS c2, GROUPING(l1.code, l2.code) AS gid, COUNT(*) AS nw FROM bp_sample JOIN bp_lev_1 AS l1 USING (f1_1) JOIN bp_lev_2 AS l2 USING (f2_1) GROUP BY GROUPING SETS ((l1.code, l2.code))
;
-- params: {"gid": 0}
SELECT c1, c2, nw FROM bp_pairs WHERE gid = %(gid)s
;
-- params: {}
SELECT f1_1 FROM bp_lev_1 ORDER BY code
;
-- params: {}
SELECT f2_1 FROM bp_lev_2 ORDER BY code
;
-- params: {}
DROP TABLE IF EXISTS "bp_alpha_1"
;
CREATE TEMPORARY TABLE "bp_alpha_1" AS SELECT * FROM "bp_alpha_1_arrow"
;
-- params: {}
DROP TABLE IF EXISTS "bp_alpha_2"
;
CREATE TEMPORARY TABLE "bp_alpha_2" AS SELECT * FROM "bp_alpha_2_arrow"
;
-- params: {}
DROP TABLE IF EXISTS bp_nested_cells
;
CREATE TEMPORARY TABLE bp_nested_cells AS SELECT f1_1, 0 AS gid, COUNT(*) AS n, COUNT(*) AS nw, SUM(u0) AS s0, SUM(u1) AS s1, SUM(u0 * u0) AS q0, SUM(u1 * u1) AS q1, SUM(u0 * u1) AS p0_1, MIN(cl1) AS cl1_min, MAX(cl1) AS cl1_max FROM (SELECT f1_1, v0 - s.m0 - a2.a0 AS u0, v1 - s.m1 - a2.a1 AS u1, cl1 FROM bp_sample CROSS JOIN bp_shift AS s JOIN bp_alpha_2 AS a2 USING (f2_1)) AS u GROUP BY f1_1
;
-- params: {"gid": 0}
DROP TABLE IF EXISTS bp_cluster_moments
;
CREATE TEMPORARY TABLE bp_cluster_moments AS SELECT GROUPING(cl1) AS gid, cl1, SUM(n) AS n, SUM(m_0_0) AS q_0_0, SUM(m_0_1) AS q_0_1, SUM(m_1_1) AS q_1_1 FROM (SELECT c.n, c.cl1_min AS cl1, c.q0 - CAST(c.s0 * c.s0 AS DOUBLE PRECISION) / c.nw AS m_0_0, c.p0_1 - CAST(c.s0 * c.s1 AS DOUBLE PRECISION) / c.nw AS m_0_1, c.q1 - CAST(c.s1 * c.s1 AS DOUBLE PRECISION) / c.nw AS m_1_1 FROM bp_nested_cells AS c JOIN bp_lev_1 USING (f1_1) WHERE c.gid = %(gid)s) AS lv GROUP BY GROUPING SETS ((cl1))
;
-- params: {"gid": 0}
SELECT SUM(n) AS n, SUM(q_0_0) AS q_0_0, SUM(q_0_1) AS q_0_1, SUM(q_1_1) AS q_1_1 FROM bp_cluster_moments WHERE gid = %(gid)s
;
-- params: {"gid": 0}
SELECT SUM(c.n) AS n, SUM(c.q0) AS q0, SUM(c.q1) AS q1 FROM bp_nested_cells AS c JOIN bp_lev_1 USING (f1_1) WHERE c.gid = %(gid)s
;
-- params: {"r0_0": 1.0, "r0_1": -0.212453}
DROP TABLE IF EXISTS bp_coef
;
CREATE TEMPORARY TABLE bp_coef AS SELECT CAST(%(r0_0)s AS DOUBLE PRECISION) AS r0_0, CAST(%(r0_1)s AS DOUBLE PRECISION) AS r0_1
;
-- params: {}
SELECT gid, COUNT(*) AS n_clusters, SUM(g0_0 * g0_0) AS h_0_0_0_0 FROM (SELECT gid, b.r0_0 * q_0_1 + b.r0_1 * q_1_1 AS g0_0 FROM bp_cluster_moments CROSS JOIN bp_coef AS b) AS g GROUP BY gid ORDER BY gid
;
-- params: {"gid": 0}
SELECT cl1, q_0_0, q_0_1, q_1_1 FROM bp_cluster_moments WHERE gid = %(gid)s
;
-- params: {"gid": 2}
SELECT c.cl1 AS cluster, l.code, c.nw, c.s0, c.s1 FROM bp_cluster_cells AS c JOIN bp_lev_2 AS l USING (f2_1) WHERE c.gid = %(gid)s
;
-- params: {"gid": 1}
SELECT c.cl1 AS cluster, l.code, c.nw, c.s0, c.s1 FROM bp_cluster_cells AS c JOIN bp_lev_1 AS l USING (f1_1) WHERE c.gid = %(gid)s
;
-- params: {}
SELECT f1_1 FROM bp_lev_1 ORDER BY code
;
-- params: {}
SELECT f2_1 FROM bp_lev_2 ORDER BY code
