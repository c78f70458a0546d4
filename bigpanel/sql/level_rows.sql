-- Rows covered by the levels of one effect.
SELECT sum(n) AS n FROM {{table}}
