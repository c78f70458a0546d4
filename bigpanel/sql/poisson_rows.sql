-- Poisson IRLS: the working rows of one step, a subquery of the passes (see
-- bigpanel/passes/irls.py). The inner joins to bp_irls_fx_d keep the sample rows whose levels
-- are kept and bring each level's code, its effect f in the linear predictor eta and its
-- effects aj already taken out of working column j. lmu = eta bounded to [-600, 600] (exp of it
-- stays finite on every engine), mu = exp(lmu), w = prior weight * mu; r0 is the working
-- outcome z = lmu + (y - mu) / mu and rj the shifted regressor j, each minus its effects so
-- far; small flags a zero outcome whose mu is below the separation bound.
SELECT {{codes}},
       y, p, mu, lmu,
       p * mu AS w,
       lmu + (y - mu) / mu - za AS r0,
       CASE WHEN y = 0 AND lmu < low THEN 1 ELSE 0 END AS small,
       {{columns}}
FROM (SELECT *, exp(lmu) AS mu
      FROM (SELECT *, greatest(least(eta, 600), -600) AS lmu
            FROM (SELECT {{inner}}
                  FROM bp_sample CROSS JOIN bp_shift AS s CROSS JOIN bp_irls_coef AS b
                  {{joins}}) AS e) AS l) AS m
