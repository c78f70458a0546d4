-- One dimension's current effects in level-code order.
SELECT {{columns}}
FROM {{alpha}} AS a JOIN {{levels}} AS l USING ({{keys}})
ORDER BY l.code
