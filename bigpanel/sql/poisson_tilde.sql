-- The Poisson fit's last step: the working columns with every effect taken out (the effects
-- of bp_irls_fx_d are then the solved ones), the working weight, what the scores and the fit
-- statistics need and the cluster columns, as the view the last pass reads.
CREATE OR REPLACE TEMP VIEW bp_tilde AS
SELECT {{columns}}
FROM ({{rows}}) AS r
