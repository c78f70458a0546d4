-- Before a multi-way reduction: the complete rows and HyperLogLog estimates of
-- the distinct levels of every effect and of the distinct pairs of levels of
-- every pair of effects, from the key columns alone. Their ratio to the rows
-- says whether pair tables would compress the panel.
SELECT count(*) AS n,
       {{estimates}}
FROM bp_sample
