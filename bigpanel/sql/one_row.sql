-- A one-row helper table of numbers bound as parameters (shifts, coefficients).
CREATE OR REPLACE TEMP TABLE {{table}} AS
SELECT {{columns}}
