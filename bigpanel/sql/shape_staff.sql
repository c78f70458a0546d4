-- Benchmark panel, invented: the chain's staff, one row per employee and year
-- (10 years), each employee working in one store per spell of 2 to 5 years and
-- moving to a store drawn at random at each new spell, so employee x store pairs
-- compress (a few spells per employee) but employee x year pairs do not.
-- log_wage = 0.6 log_hours + 0.3 training - 0.2 overtime + employee + store + year
-- effects + noise; hours and training move with the employee and store effects.
COPY (
  WITH grid AS (
    SELECT i, i // $years AS e, i % $years AS y
    FROM range($cells) AS r(i)
  ),
  spells AS (
    SELECT *,
           (y + CAST(floor(bp_unif(e, 1, $seed) * 5) AS INTEGER))
               // (2 + CAST(floor(bp_unif(e, 2, $seed) * 4) AS INTEGER)) AS spell
    FROM grid
  ),
  placed AS (
    SELECT *, CAST(floor(bp_unif(e * 16 + spell, 3, $seed) * $stores) AS INTEGER) AS st
    FROM spells
  ),
  draws AS (
    SELECT *,
           bp_normal(e, 5, $seed) AS z_emp,
           bp_normal(st, 7, $seed) AS z_store,
           bp_normal(y, 9, $seed) AS z_year,
           bp_normal(i, 11, $seed) AS z1,
           bp_normal(i, 13, $seed) AS z2,
           bp_normal(i, 15, $seed) AS z3,
           bp_normal(i, 17, $seed) AS z_noise
    FROM placed
  )
  SELECT CAST(e + 1 AS INTEGER) AS employee,
         CAST(st + 1 AS INTEGER) AS store,
         CAST(2015 + y AS SMALLINT) AS year,
         z1 + 0.4 * z_emp + 0.3 * z_store AS log_hours,
         z2 + 0.2 * z_emp AS training,
         z3 AS overtime,
         0.6 * (z1 + 0.4 * z_emp + 0.3 * z_store) + 0.3 * (z2 + 0.2 * z_emp) - 0.2 * z3
             + z_emp + 0.5 * z_store + 0.2 * z_year + z_noise AS log_wage
  FROM draws
) TO {{path}} (FORMAT parquet, ROW_GROUP_SIZE 1000000)
