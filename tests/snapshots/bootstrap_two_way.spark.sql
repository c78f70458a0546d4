-- params: {}
CREATE OR REPLACE TEMPORARY VIEW bp_filtered AS SELECT CAST(`y` AS DOUBLE) AS v0, CAST(`select` AS DOUBLE) AS v1, `shop id` AS f1_1, `wk"` AS f2_1, `area` AS cl1 FROM bp_source WHERE TRUE
;
-- params: {}
CREATE OR REPLACE TEMPORARY VIEW bp_sample AS SELECT * FROM bp_filtered WHERE (NOT ISNAN(v0) AND ABS(v0) <> CAST('inf' AS DOUBLE)) AND (NOT ISNAN(v1) AND ABS(v1) <> CAST('inf' AS DOUBLE)) AND NOT f1_1 IS NULL AND NOT f2_1 IS NULL AND NOT cl1 IS NULL
;
-- params: {}
SELECT COUNT(*) AS n FROM bp_filtered
;
-- params: {}
SELECT AVG(v0) AS m0, AVG(v1) AS m1 FROM (SELECT v0, v1 FROM bp_sample LIMIT 1000) AS head
;
-- params: {"m0": 0.00377972, "m1": 0.0794713}
-- materialised as bp_shift
SELECT CAST(:m0 AS DOUBLE) AS m0, CAST(:m1 AS DOUBLE) AS m1
;
-- params: {}
-- materialised as bp_cluster_cells
SELECT cl1, f1_1, f2_1, GROUPING_ID(cl1, f1_1, f2_1) AS gid, COUNT(*) AS n, COUNT(*) AS nw, SUM((v0 - s.m0)) AS s0, SUM((v1 - s.m1)) AS s1, SUM((v0 - s.m0) * (v0 - s.m0)) AS q0, SUM((v1 - s.m1) * (v1 - s.m1)) AS q1, MIN(cl1) AS cl1_min, MAX(cl1) AS cl1_max FROM bp_sample CROSS JOIN bp_shift AS s GROUP BY GROUPING SETS ((cl1, f1_1), (cl1, f2_1))
;
-- params: {"gid0": 1, "gid1": 2}
-- materialised as bp_cells
SELECT * FROM (SELECT f1_1, f2_1, GROUPING_ID(f1_1, f2_1) AS gid, SUM(n) AS n, SUM(nw) AS nw, SUM(s0) AS s0, SUM(s1) AS s1, SUM(q0) AS q0, SUM(q1) AS q1, MIN(cl1_min) AS cl1_min, MAX(cl1_max) AS cl1_max FROM bp_cluster_cells GROUP BY GROUPING SETS ((f1_1), (f2_1))) AS c WHERE (gid = :gid0 AND NOT f1_1 IS NULL) OR (gid = :gid1 AND NOT f2_1 IS NULL)
;
-- params: {"gid": 1, "min_count": 1}
-- materialised as bp_lev_1
SELECT f1_1, CAST(ROW_NUMBER() OVER (ORDER BY f1_1 NULLS LAST) - 1 AS INT) AS code, CAST(n AS BIGINT) AS n, CAST(nw AS DOUBLE) AS nw FROM bp_cells WHERE gid = :gid AND n >= :min_count
;
-- params: {"gid": 2, "min_count": 1}
-- materialised as bp_lev_2
SELECT f2_1, CAST(ROW_NUMBER() OVER (ORDER BY f2_1 NULLS LAST) - 1 AS INT) AS code, CAST(n AS BIGINT) AS n, CAST(nw AS DOUBLE) AS nw FROM bp_cells WHERE gid = :gid AND n >= :min_count
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
SELECT nw, n FROM bp_lev_1 ORDER BY code NULLS LAST
;
-- params: {"gid": 1}
SELECT COALESCE(BOOL_AND(c.cl1_min = c.cl1_max), FALSE) AS nested FROM bp_cells AS c JOIN bp_lev_1 USING (f1_1) WHERE c.gid = :gid
;
-- params: {}
SELECT nw, n FROM bp_lev_2 ORDER BY code NULLS LAST
;
-- params: {"gid": 2}
SELECT COALESCE(BOOL_AND(c.cl1_min = c.cl1_max), FALSE) AS nested FROM bp_cells AS c JOIN bp_lev_2 USING (f2_1) WHERE c.gid = :gid
;
-- params: {"gid": 1}
SELECT l.code, c.s0, c.s1, c.q0, c.q1 FROM bp_cells AS c JOIN bp_lev_1 AS l USING (f1_1) WHERE c.gid = :gid ORDER BY l.code NULLS LAST
;
-- params: {"gid": 2}
SELECT l.code, c.s0, c.s1, c.q0, c.q1 FROM bp_cells AS c JOIN bp_lev_2 AS l USING (f2_1) WHERE c.gid = :gid ORDER BY l.code NULLS LAST
;
-- params: {}
-- materialised as bp_pairs
SELECT l1.code AS c1, l2.code AS c2, GROUPING_ID(l1.code, l2.code) AS gid, COUNT(*) AS nw FROM bp_sample JOIN bp_lev_1 AS l1 USING (f1_1) JOIN bp_lev_2 AS l2 USING (f2_1) GROUP BY GROUPING SETS ((l1.code, l2.code))
;
-- params: {"gid": 0}
SELECT c1, c2, nw FROM bp_pairs WHERE gid = :gid
;
-- params: {}
SELECT f1_1 FROM bp_lev_1 ORDER BY code NULLS LAST
;
-- params: {}
SELECT f2_1 FROM bp_lev_2 ORDER BY code NULLS LAST
;
-- params: {}
-- materialised as bp_alpha_1
SELECT * FROM `bp_alpha_1_arrow`
;
-- params: {}
-- materialised as bp_alpha_2
SELECT * FROM `bp_alpha_2_arrow`
;
-- params: {}
-- materialised as bp_nested_cells
SELECT f1_1, 0 AS gid, COUNT(*) AS n, COUNT(*) AS nw, SUM(u0) AS s0, SUM(u1) AS s1, SUM(u0 * u0) AS q0, SUM(u1 * u1) AS q1, SUM(u0 * u1) AS p0_1, MIN(cl1) AS cl1_min, MAX(cl1) AS cl1_max FROM (SELECT f1_1, v0 - s.m0 - a2.a0 AS u0, v1 - s.m1 - a2.a1 AS u1, cl1 FROM bp_sample CROSS JOIN bp_shift AS s JOIN bp_alpha_2 AS a2 USING (f2_1)) AS u GROUP BY f1_1
;
-- params: {"gid": 0}
-- materialised as bp_cluster_moments
SELECT GROUPING_ID(cl1) AS gid, cl1, SUM(n) AS n, SUM(m_0_0) AS q_0_0, SUM(m_0_1) AS q_0_1, SUM(m_1_1) AS q_1_1 FROM (SELECT c.n, c.cl1_min AS cl1, c.q0 - c.s0 * c.s0 / c.nw AS m_0_0, c.p0_1 - c.s0 * c.s1 / c.nw AS m_0_1, c.q1 - c.s1 * c.s1 / c.nw AS m_1_1 FROM bp_nested_cells AS c JOIN bp_lev_1 USING (f1_1) WHERE c.gid = :gid) AS lv GROUP BY GROUPING SETS ((cl1))
;
-- params: {"gid": 0}
SELECT SUM(n) AS n, SUM(q_0_0) AS q_0_0, SUM(q_0_1) AS q_0_1, SUM(q_1_1) AS q_1_1 FROM bp_cluster_moments WHERE gid = :gid
;
-- params: {"gid": 0}
SELECT SUM(c.n) AS n, SUM(c.q0) AS q0, SUM(c.q1) AS q1 FROM bp_nested_cells AS c JOIN bp_lev_1 USING (f1_1) WHERE c.gid = :gid
;
-- params: {"r0_0": 1.0, "r0_1": -0.212453}
-- materialised as bp_coef
SELECT CAST(:r0_0 AS DOUBLE) AS r0_0, CAST(:r0_1 AS DOUBLE) AS r0_1
;
-- params: {}
SELECT gid, COUNT(*) AS n_clusters, SUM(g0_0 * g0_0) AS h_0_0_0_0 FROM (SELECT gid, b.r0_0 * q_0_1 + b.r0_1 * q_1_1 AS g0_0 FROM bp_cluster_moments CROSS JOIN bp_coef AS b) AS g GROUP BY gid ORDER BY gid NULLS LAST
;
-- params: {"gid": 0}
SELECT cl1, q_0_0, q_0_1, q_1_1 FROM bp_cluster_moments WHERE gid = :gid
;
-- params: {"gid": 2}
SELECT c.cl1 AS cluster, l.code, c.nw, c.s0, c.s1 FROM bp_cluster_cells AS c JOIN bp_lev_2 AS l USING (f2_1) WHERE c.gid = :gid
;
-- params: {"gid": 1}
SELECT c.cl1 AS cluster, l.code, c.nw, c.s0, c.s1 FROM bp_cluster_cells AS c JOIN bp_lev_1 AS l USING (f1_1) WHERE c.gid = :gid
;
-- params: {}
SELECT f1_1 FROM bp_lev_1 ORDER BY code NULLS LAST
;
-- params: {}
SELECT f2_1 FROM bp_lev_2 ORDER BY code NULLS LAST
