-- The panel as a view over one CSV file with a header row; ragged rows are an error.
CREATE OR REPLACE TEMP VIEW bp_source AS
SELECT * FROM read_csv({{path}}, header = true, strict_mode = true, null_padding = false)
