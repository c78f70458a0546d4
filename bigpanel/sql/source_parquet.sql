-- The panel as a view over Parquet files; the file list is a quoted literal list.
CREATE OR REPLACE TEMP VIEW bp_source AS
SELECT * FROM read_parquet({{paths}}, union_by_name = false)
