-- Benchmark panels beside the demo, all invented (a retail chain):
-- * store-week: one row per store and week (150 weeks, about 3% of the cells
--   missing at random), log sales on three regressors with store and week effects;
-- * store-week-supplier: the same plus the supplier of the week's main delivery,
--   about 1,000 levels drawn at random for every row (an effect that cuts across
--   stores and weeks);
-- * store-week-region: store-week plus the store's region, 50 regions (stores
--   nested in regions: few clusters for the wild cluster bootstrap);
-- * store-week-iv: store-week with two cost shifters, cost_index and rival_price,
--   that move log_price, and a price that also answers the demand noise (so
--   log_price is endogenous and the shifters are valid instruments);
-- * store-week-adoption: the same as store-week plus a staggered adoption (a store
--   remodel): 30% of the stores never adopt, the others from a week drawn between
--   20 and 140 (first_week); from then on sales rise by 0.05 + 0.002 per week since;
-- * store-week-counts: store-week plus units, a count with zeros whose mean is
--   exp(0.5 + 0.3 log_price - 0.5 promo_share + 0.25 staff_hours + 0.5 store + 0.3 week)
--   (a log-normal factor of mean 1, then rounded down after adding a uniform draw,
--   which keeps the mean), for the Poisson fit.
-- log_sales = 1.0 log_price - 0.5 promo_share + 0.25 staff_hours + store + week
--             (+ supplier) effects (+ the adoption effect) + noise; the regressors move
-- with the store and week effects, so pooled OLS is biased. Rows are written store by store.
COPY (
  WITH grid AS (
    SELECT i, i // $weeks AS s, i % $weeks AS w
    FROM range($cells) AS r(i)
  ),
  draws AS (
    SELECT *,
           bp_normal(s, 1, $seed) AS z_store,
           bp_normal(w, 3, $seed) AS z_week,
           bp_normal(i, 5, $seed) AS z1,
           bp_normal(i, 7, $seed) AS z2,
           bp_normal(i, 9, $seed) AS z3,
           bp_normal(i, 11, $seed) AS z_noise,
           CAST(floor(bp_unif(i, 13, $seed) * $suppliers) AS INTEGER) AS supplier,
           bp_unif(i, 14, $seed) AS u_keep,
           CASE WHEN bp_unif(s, 17, $seed) >= 0.3
                THEN 20 + CAST(floor(bp_unif(s, 19, $seed) * 121) AS INTEGER) END AS first
    FROM grid
  )
  SELECT CAST(s + 1 AS INTEGER) AS store,
         CAST(w + 1 AS SMALLINT) AS week,
         {{supplier_column}}{{instrument_columns}}{{adoption_column}}{{count_column}}
         {{region_column}}
         z1 + 0.5 * z_store {{price_shift}} AS log_price,
         z2 + 0.3 * z_week AS promo_share,
         z3 AS staff_hours,
         1.0 * (z1 + 0.5 * z_store {{price_shift}}) - 0.5 * (z2 + 0.3 * z_week) + 0.25 * z3
             + z_store + z_week {{supplier_effect}}{{adoption_effect}} + z_noise AS log_sales
  FROM draws
  WHERE u_keep >= 0.03
) TO {{path}} (FORMAT parquet, ROW_GROUP_SIZE 1000000)
