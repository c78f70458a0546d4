-- The source under internal names for the panel description: u is the unit,
-- t the period and cj column j of the source. The only describe statement
-- that names user columns; each is a quoted identifier.
CREATE OR REPLACE TEMP VIEW bp_panel AS
SELECT {{id}} AS u,
       {{time}} AS t,
       {{columns}}
FROM bp_source
