-- An invented retail chain: stores x products x weeks, log units sold on log
-- price and promotion, with store, product and week effects. Pseudo-random
-- numbers come from the bp_unif / bp_normal macros (sql/demo_macros.sql), so the
-- panel is the same for the same seed whatever the thread count. shelf_m2 is a store trait
-- (time-invariant), region groups stores (stores are nested in regions).
COPY (
  WITH grid AS (
    SELECT i,
           i % $weeks AS w,
           (i // $weeks) % $products AS p,
           i // ($weeks * $products) AS s
    FROM range($rows) AS r(i)
  ),
  draws AS (
    SELECT *,
           bp_normal(s, 1, $seed) AS z_store,
           bp_normal(p, 3, $seed) AS z_product,
           bp_normal(w, 5, $seed) AS z_week,
           bp_normal(i, 7, $seed) AS z_price,
           bp_normal(i, 9, $seed) AS z_noise,
           bp_unif(i, 11, $seed) AS u_promo,
           bp_unif(i, 12, $seed) AS u_missing,
           bp_unif(s, 13, $seed) AS u_shelf
    FROM grid
  ),
  panel AS (
    SELECT *,
           CAST(u_promo < 0.12 + 0.10 * CAST(sin(2 * pi() * w / 52) > 0.5 AS DOUBLE) AS INTEGER) AS promo,
           0.5 * z_store AS store_fx,
           0.8 * z_product AS product_fx,
           0.2 * sin(2 * pi() * w / 52) + 0.05 * z_week AS week_fx
    FROM draws
  ),
  priced AS (
    SELECT *,
           1.0 + 0.3 * z_product + 0.2 * z_store + 0.1 * z_price - 0.1 * promo AS price_raw
    FROM panel
  )
  SELECT CAST(s + 1 AS INTEGER) AS store,
         'SKU-' || lpad(CAST(p + 1 AS VARCHAR), 5, '0') AS product,
         CAST(DATE '2024-01-01' + CAST(7 * w AS INTEGER) AS DATE) AS week,
         'R' || lpad(CAST(s % $regions + 1 AS VARCHAR), 2, '0') AS region,
         CAST(round(150 + 100 * u_shelf) AS DOUBLE) AS shelf_m2,
         promo,
         CASE WHEN u_missing < 0.001 THEN NULL ELSE price_raw END AS log_price,
         2.0 + $beta_price * price_raw + $beta_promo * promo
             + store_fx + product_fx + week_fx + 0.3 * z_noise AS log_units
  FROM priced
) TO {{path}} ({{format}})
