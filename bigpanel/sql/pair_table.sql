-- One pair of effects from the pair tables: codes and weight, for numpy.
SELECT {{codes}}, nw
FROM bp_pairs
WHERE gid = $gid
