"""How many parameters the fixed effects absorb.

With G_d levels of effect d, the intercept plus p_d parameters per effect:

* effect 1: p_1 = G_1 - 1;
* effect 2: p_2 = G_2 - C, where C is the number of connected components of the
  graph that links the levels of effects 1 and 2 sharing a row (one level of
  effect 2 is redundant per component; exact);
* effects 3 and up: p_d = G_d - 1. This is exact when the only redundancy left
  is the common intercept and conservative otherwise (it may count a few
  parameters too many, which widens the errors slightly).

P = 1 + sum_d p_d enters the residual degrees of freedom N - K - P. For
cluster-robust errors, an effect nested in the clustering (each of its levels
lies in one cluster) is not counted: P_c = 1 + sum of p_d over the effects that
are not nested. With several cluster columns, each term of the
inclusion-exclusion sum clusters by a combination of columns, and an effect is
nested in a combination when it is nested in every column of it.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Absorbed:
    """Absorbed parameter counts (see the module docstring)."""

    per_effect: list[int]
    total: int
    components: int | None
    nested: list[list[bool]]

    def cluster_total(self, columns: tuple[int, ...]) -> int:
        """P_c for clustering by the combination of cluster columns ``columns``."""
        if not self.per_effect:
            return 0  # no absorbed effects: the intercept, if any, is among the K regressors
        return 1 + sum(p for p, flags in zip(self.per_effect, self.nested) if not all(flags[j] for j in columns))


NO_EFFECTS = Absorbed(per_effect=[], total=0, components=None, nested=[])


def count_absorbed(levels: list[int], components: int | None, nested: list[list[bool]]) -> Absorbed:
    """Apply the counting rule to level counts, components of effects 1-2 and nesting flags.

    ``nested[d][j]`` says whether effect d is nested in cluster column j.
    """
    per = [levels[0] - 1]
    if len(levels) >= 2:
        per.append(levels[1] - int(components))
    per += [g - 1 for g in levels[2:]]
    return Absorbed(per_effect=per, total=1 + sum(per), components=components, nested=nested)
