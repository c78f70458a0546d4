-- The panel as a view over one CSV file with a header row and a known
-- delimiter; rows with a different number of fields are an error.
CREATE OR REPLACE TEMP VIEW bp_source AS
SELECT * FROM read_csv({{path}}, header = true, delim = {{delim}}, strict_mode = true, null_padding = false)
