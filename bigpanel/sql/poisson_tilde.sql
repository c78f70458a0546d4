-- The Poisson fit's last step: the working columns with every effect taken out (the effects
-- of bp_irls_fx_d are then the solved ones), the working weight and the cluster columns,
-- as the view the cross-product and meat passes read.
CREATE OR REPLACE TEMP VIEW bp_tilde AS
SELECT {{columns}}
FROM bp_irls
