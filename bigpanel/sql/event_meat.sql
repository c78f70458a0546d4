-- Event study, the scores per cluster put together from the sums of event_scores (with
-- the coefficients of the one-row table bp_event_coef), and the sums over clusters of
-- their products: the variance of the estimates and the pre-trend fit's meat.
SELECT count(*) AS clusters,
       sum(CASE WHEN n_untreated > 0 THEN 1 ELSE 0 END) AS clusters_untreated,
       {{sums}}
FROM (SELECT n_untreated,
             {{scores}}
      FROM bp_event_scores CROSS JOIN bp_event_coef AS b) AS g
