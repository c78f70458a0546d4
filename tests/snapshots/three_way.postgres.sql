-- params: {}
;
SELECT COUNT(*) AS n FROM (SELECT * FROM bp_source LIMIT 0) AS s WHERE (x1 > -2.5)
;
-- params: {}
;
CREATE OR REPLACE TEMPORARY VIEW bp_filtered AS SELECT CAST("y" AS DOUBLE PRECISION) AS v0, CAST("x1" AS DOUBLE PRECISION) AS v1, "shop id" AS f1_1, "week" AS f2_1, "item" AS f3_1, "region" AS cl1, "shop id" AS cl2, CAST("w" AS DOUBLE PRECISION) AS w FROM bp_source WHERE (x1 > -2.5)
;
-- params: {}
;
CREATE OR REPLACE TEMPORARY VIEW bp_sample AS SELECT * FROM bp_filtered WHERE (NOT v0 IN (CAST('Infinity' AS DOUBLE PRECISION), CAST('-Infinity' AS DOUBLE PRECISION), CAST('NaN' AS DOUBLE PRECISION))) AND (NOT v1 IN (CAST('Infinity' AS DOUBLE PRECISION), CAST('-Infinity' AS DOUBLE PRECISION), CAST('NaN' AS DOUBLE PRECISION))) AND NOT f1_1 IS NULL AND NOT f2_1 IS NULL AND NOT f3_1 IS NULL AND NOT cl1 IS NULL AND NOT cl2 IS NULL AND (NOT w IN (CAST('Infinity' AS DOUBLE PRECISION), CAST('-Infinity' AS DOUBLE PRECISION), CAST('NaN' AS DOUBLE PRECISION))) AND w > 0
;
-- params: {}
;
SELECT COUNT(*) AS n FROM bp_filtered
;
-- params: {}
;
SELECT COUNT(*) AS n FROM bp_source
;
-- params: {}
;
SELECT AVG(v0) AS m0, AVG(v1) AS m1 FROM (SELECT v0, v1 FROM bp_sample LIMIT 1000) AS head
;
-- params: {"m0": -0.043423, "m1": -0.0267064}
;
DROP TABLE IF EXISTS bp_shift
;
CREATE TEMPORARY TABLE bp_shift AS SELECT CAST(%(m0)s AS DOUBLE PRECISION) AS m0, CAST(%(m1)s AS DOUBLE PRECISION) AS m1
;
-- params: {}
;
DROP TABLE IF EXISTS bp_cells
;
CREATE TEMPORARY TABLE bp_cells AS SELECT f1_1, f2_1, f3_1, GROUPING(f1_1, f2_1, f3_1) AS gid, COUNT(*) AS n, SUM(w) AS nw, SUM(w * (v0 - s.m0)) AS s0, SUM(w * (v1 - s.m1)) AS s1, SUM(w * (v0 - s.m0) * (v0 - s.m0)) AS q0, SUM(w * (v1 - s.m1) * (v1 - s.m1)) AS q1, MIN(cl1) AS cl1_min, MAX(cl1) AS cl1_max, MIN(cl2) AS cl2_min, MAX(cl2) AS cl2_max FROM bp_sample CROSS JOIN bp_shift AS s GROUP BY GROUPING SETS ((f1_1), (f2_1), (f3_1))
;
-- params: {"gid": 3, "min_count": 1}
;
DROP TABLE IF EXISTS bp_lev_1
;
CREATE TEMPORARY TABLE bp_lev_1 AS SELECT f1_1, CAST(ROW_NUMBER() OVER (ORDER BY f1_1) - 1 AS INT) AS code, CAST(n AS BIGINT) AS n, CAST(nw AS DOUBLE PRECISION) AS nw FROM bp_cells WHERE gid = %(gid)s AND n >= %(min_count)s
;
-- params: {"gid": 5, "min_count": 1}
;
DROP TABLE IF EXISTS bp_lev_2
;
CREATE TEMPORARY TABLE bp_lev_2 AS SELECT f2_1, CAST(ROW_NUMBER() OVER (ORDER BY f2_1) - 1 AS INT) AS code, CAST(n AS BIGINT) AS n, CAST(nw AS DOUBLE PRECISION) AS nw FROM bp_cells WHERE gid = %(gid)s AND n >= %(min_count)s
;
-- params: {"gid": 6, "min_count": 1}
;
DROP TABLE IF EXISTS bp_lev_3
;
CREATE TEMPORARY TABLE bp_lev_3 AS SELECT f3_1, CAST(ROW_NUMBER() OVER (ORDER BY f3_1) - 1 AS INT) AS code, CAST(n AS BIGINT) AS n, CAST(nw AS DOUBLE PRECISION) AS nw FROM bp_cells WHERE gid = %(gid)s AND n >= %(min_count)s
;
-- params: {}
;
SELECT SUM(n) AS n FROM bp_lev_1
;
-- params: {}
;
SELECT COUNT(*) AS n_single FROM bp_lev_1 WHERE n = 1
;
-- params: {}
;
SELECT COUNT(*) AS n_single FROM bp_lev_2 WHERE n = 1
;
-- params: {}
;
SELECT COUNT(*) AS n_single FROM bp_lev_3 WHERE n = 1
;
-- params: {}
;
SELECT nw, n FROM bp_lev_1 ORDER BY code
;
-- params: {"gid": 3}
;
SELECT COALESCE(BOOL_AND(c.cl1_min = c.cl1_max), FALSE) AS nested FROM bp_cells AS c JOIN bp_lev_1 USING (f1_1) WHERE c.gid = %(gid)s
;
-- params: {"gid": 3}
;
SELECT COALESCE(BOOL_AND(c.cl2_min = c.cl2_max), FALSE) AS nested FROM bp_cells AS c JOIN bp_lev_1 USING (f1_1) WHERE c.gid = %(gid)s
;
-- params: {}
;
SELECT nw, n FROM bp_lev_2 ORDER BY code
;
-- params: {"gid": 5}
;
SELECT COALESCE(BOOL_AND(c.cl1_min = c.cl1_max), FALSE) AS nested FROM bp_cells AS c JOIN bp_lev_2 USING (f2_1) WHERE c.gid = %(gid)s
;
-- params: {"gid": 5}
;
SELECT COALESCE(BOOL_AND(c.cl2_min = c.cl2_max), FALSE) AS nested FROM bp_cells AS c JOIN bp_lev_2 USING (f2_1) WHERE c.gid = %(gid)s
;
-- params: {}
;
SELECT nw, n FROM bp_lev_3 ORDER BY code
;
-- params: {"gid": 6}
;
SELECT COALESCE(BOOL_AND(c.cl1_min = c.cl1_max), FALSE) AS nested FROM bp_cells AS c JOIN bp_lev_3 USING (f3_1) WHERE c.gid = %(gid)s
;
-- params: {"gid": 6}
;
SELECT COALESCE(BOOL_AND(c.cl2_min = c.cl2_max), FALSE) AS nested FROM bp_cells AS c JOIN bp_lev_3 USING (f3_1) WHERE c.gid = %(gid)s
;
-- params: {"gid": 3}
;
SELECT l.code, c.s0, c.s1, c.q0, c.q1 FROM bp_cells AS c JOIN bp_lev_1 AS l USING (f1_1) WHERE c.gid = %(gid)s ORDER BY l.code
;
-- params: {"gid": 5}
;
SELECT l.code, c.s0, c.s1, c.q0, c.q1 FROM bp_cells AS c JOIN bp_lev_2 AS l USING (f2_1) WHERE c.gid = %(gid)s ORDER BY l.code
;
-- params: {"gid": 6}
;
SELECT l.code, c.s0, c.s1, c.q0, c.q1 FROM bp_cells AS c JOIN bp_lev_3 AS l USING (f3_1) WHERE c.gid = %(gid)s ORDER BY l.code
;
-- params: {}
;
DROP TABLE IF EXISTS bp_pairs
;
CREATE TEMPORARY TABLE bp_pairs AS SELECT l1.code AS c1, l2.code AS c2, l3.code AS c3, GROUPING(l1.code, l2.code, l3.code) AS gid, SUM(w) AS nw FROM bp_sample JOIN bp_lev_1 AS l1 USING (f1_1) JOIN bp_lev_2 AS l2 USING (f2_1) JOIN bp_lev_3 AS l3 USING (f3_1) GROUP BY GROUPING SETS ((l1.code, l2.code), (l1.code, l3.code), (l2.code, l3.code))
;
-- params: {"gid": 1}
;
SELECT c1, c2, nw FROM bp_pairs WHERE gid = %(gid)s
;
-- params: {"gid": 2}
;
SELECT c1, c3, nw FROM bp_pairs WHERE gid = %(gid)s
;
-- params: {"gid": 4}
;
SELECT c2, c3, nw FROM bp_pairs WHERE gid = %(gid)s
;
-- params: {}
;
SELECT f1_1 FROM bp_lev_1 ORDER BY code
;
-- params: {}
;
SELECT f2_1 FROM bp_lev_2 ORDER BY code
;
-- params: {}
;
SELECT f3_1 FROM bp_lev_3 ORDER BY code
;
-- params: {}
;
DROP TABLE IF EXISTS "bp_alpha_1"
;
CREATE TEMPORARY TABLE "bp_alpha_1" AS SELECT * FROM "bp_alpha_1_arrow"
;
-- params: {}
;
DROP TABLE IF EXISTS "bp_alpha_2"
;
CREATE TEMPORARY TABLE "bp_alpha_2" AS SELECT * FROM "bp_alpha_2_arrow"
;
-- params: {}
;
DROP TABLE IF EXISTS "bp_alpha_3"
;
CREATE TEMPORARY TABLE "bp_alpha_3" AS SELECT * FROM "bp_alpha_3_arrow"
;
-- params: {}
;
CREATE OR REPLACE TEMPORARY VIEW bp_tilde AS SELECT v0 - s.m0 - a1.a0 - a2.a0 - a3.a0 AS e0, v1 - s.m1 - a1.a1 - a2.a1 - a3.a1 AS e1, cl1, cl2, w FROM bp_sample CROSS JOIN bp_shift AS s JOIN bp_alpha_1 AS a1 USING (f1_1) JOIN bp_alpha_2 AS a2 USING (f2_1) JOIN bp_alpha_3 AS a3 USING (f3_1)
;
-- params: {}
;
DROP TABLE IF EXISTS bp_cluster_moments
;
CREATE TEMPORARY TABLE bp_cluster_moments AS SELECT GROUPING(cl1, cl2) AS gid, cl1, cl2, COUNT(*) AS n, SUM(w * e0 * e0) AS q_0_0, SUM(w * e0 * e1) AS q_0_1, SUM(w * e1 * e1) AS q_1_1 FROM bp_tilde GROUP BY GROUPING SETS ((cl1), (cl2), (cl1, cl2))
;
-- params: {"gid": 1}
;
SELECT SUM(n) AS n, SUM(q_0_0) AS q_0_0, SUM(q_0_1) AS q_0_1, SUM(q_1_1) AS q_1_1 FROM bp_cluster_moments WHERE gid = %(gid)s
;
-- params: {"r0_0": 1.0, "r0_1": -0.441666}
;
DROP TABLE IF EXISTS bp_coef
;
CREATE TEMPORARY TABLE bp_coef AS SELECT CAST(%(r0_0)s AS DOUBLE PRECISION) AS r0_0, CAST(%(r0_1)s AS DOUBLE PRECISION) AS r0_1
;
-- params: {}
;
SELECT gid, COUNT(*) AS n_clusters, SUM(g0_0 * g0_0) AS h_0_0_0_0 FROM (SELECT gid, b.r0_0 * q_0_1 + b.r0_1 * q_1_1 AS g0_0 FROM bp_cluster_moments CROSS JOIN bp_coef AS b) AS g GROUP BY gid ORDER BY gid
;
-- params: {}
;
SELECT f1_1 FROM bp_lev_1 ORDER BY code
;
-- params: {}
;
SELECT f2_1 FROM bp_lev_2 ORDER BY code
;
-- params: {}
;
SELECT f3_1 FROM bp_lev_3 ORDER BY code
