-- The levels of one effect in code order (keys or row counts).
SELECT {{columns}} FROM {{table}} ORDER BY code
