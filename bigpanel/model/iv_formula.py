"""The instruments in a formula, in plain words: ``y ~ x1 + p, p instrumented by z1 + z2``.

After the model formula, a comma and a clause ``TERMS instrumented by TERMS`` name the
endogenous regressors (terms of the formula's right-hand side, or new ones, which join
it) and their excluded instruments, each side in the formula language of
:mod:`bigpanel.model.formula`. The comma and the words count only outside brackets,
braces and backticks, and the words in any case (``Instrumented By``).
"""

from __future__ import annotations

import re

from ..errors import BigPanelError
from .formula import parse_rhs, term_label

_WORDS = re.compile(r"\s+instrumented\s+by\s+", re.IGNORECASE)
EXAMPLE = "'log_units ~ promo + log_price, log_price instrumented by cost_index + rival_price'"


def _top_level(text: str) -> list[bool]:
    """For each character of ``text``, whether it lies outside (), {} and backticks."""
    depth, quoted, out = 0, False, []
    for ch in text:
        if ch == "`":
            quoted = not quoted
        elif not quoted and ch in "({":
            depth += 1
        elif not quoted and ch in ")}":
            depth -= 1
        out.append(depth == 0 and not quoted and ch not in "`")
    return out


def split_instrumented(formula: str) -> tuple[str, list[str], list[str]]:
    """The model formula without the clause, the endogenous terms' labels and the instruments'
    labels (both empty when there is no clause)."""
    outside = _top_level(formula)
    commas = [i for i, ch in enumerate(formula) if ch == "," and outside[i]]
    if not commas:
        if any(outside[m.start()] for m in _WORDS.finditer(formula)):
            raise BigPanelError(f"formula {formula!r}: put a comma before the instruments, as in {EXAMPLE}")
        return formula, [], []
    if len(commas) > 1:
        raise BigPanelError(f"formula {formula!r} has more than one clause after the model: write {EXAMPLE}")
    model, clause = formula[:commas[0]], formula[commas[0] + 1:]
    found = [m for m in _WORDS.finditer(clause) if outside[commas[0] + 1 + m.start()]]
    if len(found) != 1:
        raise BigPanelError(f"formula {formula!r}: the clause after the comma must read 'ENDOGENOUS instrumented by "
                            f"INSTRUMENTS', as in {EXAMPLE}")
    left, right = clause[:found[0].start()].strip(), clause[found[0].end():].strip()
    if not left or not right:
        raise BigPanelError(f"formula {formula!r}: name both the endogenous terms and the instruments, as in {EXAMPLE}")
    return model, [term_label(t) for t in parse_rhs(left)], [term_label(t) for t in parse_rhs(right)]
