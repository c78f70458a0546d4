-- Does a floating-point key column hold a value that is not a whole number? (stops at the first one)
SELECT count(*) AS n FROM (SELECT 1 FROM bp_source WHERE {{column}} <> floor({{column}}) LIMIT 1) AS s
