-- How many levels of one effect hold a single row.
SELECT count(*) AS n_single FROM {{table}} WHERE n = 1
