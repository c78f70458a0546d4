-- The levels of one effect in code order (keys, row count, nesting flag).
SELECT {{columns}} FROM {{table}} ORDER BY code
