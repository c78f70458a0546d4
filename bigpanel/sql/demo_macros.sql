-- Pseudo-random draws for the demo panel: a uniform on (0, 1) and a standard
-- normal (Box-Muller) from the hash of one integer (entity * 64 + stream + seed
-- * 2^40), so every entity and stream gets its own independent-looking draw.
CREATE OR REPLACE TEMP MACRO bp_unif(a, k, seed) AS
  (hash(a * 64 + k + seed * 1099511627776) % 4294967296 + 0.5) / 4294967296;
CREATE OR REPLACE TEMP MACRO bp_normal(a, k, seed) AS
  sqrt(-2 * ln(bp_unif(a, k, seed))) * cos(2 * pi() * bp_unif(a, k + 1, seed));
