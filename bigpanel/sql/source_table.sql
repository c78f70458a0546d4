-- The panel as a view over a table of the attached database.
CREATE OR REPLACE TEMP VIEW bp_source AS
SELECT * FROM bp_db.{{table}}
