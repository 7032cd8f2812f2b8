"""Cautions a fit carries wherever it is shown (text, JSON ``cautions``, report): too few
taxa for a scaling exponent, and a correlation too weak for a model II line.

Rules and references: docs/methods/fitting.md, "Cautions".
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

#: Fewest taxa for a scaling exponent without a caution (common practice: below about ten
#: points an exponent's interval is wide and one taxon can move it).
MIN_TAXA = 10

#: |r| below which an SMA or MA slope is flagged: the line's direction is then poorly
#: determined (Warton et al. 2006) and the slope test may reject more often than its
#: level; the cut-off 0.3 is common practice.
WEAK_R = 0.3


def few_taxa(n: int, group: str | None = None) -> dict | None:
    """The caution for a fit (or a group's line) on fewer than :data:`MIN_TAXA` taxa."""
    if n >= MIN_TAXA:
        return None
    who = f"group {group!r}: " if group is not None else ""
    return {
        "rule": "few_taxa",
        "group": group,
        "n": int(n),
        "minimum": MIN_TAXA,
        "message": f"{who}only {n} taxa (fewer than {MIN_TAXA}, a rule of thumb for a scaling "
        "exponent): the exponent rests on few points",
    }


def weak_correlation(method: str, X: np.ndarray, Y: np.ndarray) -> dict | None:
    """The caution for an SMA or MA line when |r| (Pearson, fitted scale) < :data:`WEAK_R`."""
    if method not in ("sma", "ma") or len(X) < 3:
        return None
    with np.errstate(all="ignore"):
        r = float(np.corrcoef(X, Y)[0, 1])
    if not math.isfinite(r) or abs(r) >= WEAK_R:
        return None
    return {
        "rule": "weak_correlation",
        "r": r,
        "threshold": WEAK_R,
        "message": f"weak correlation (|r| = {abs(r):.2f} < {WEAK_R:g}): the {method.upper()} "
        "slope is poorly determined and its slope test may reject more often than its "
        "level; test r first",
    }


def fit_cautions(
    method: str,
    n: int,
    X: np.ndarray | None = None,
    Y: np.ndarray | None = None,
    groups: Sequence[dict] | None = None,
) -> tuple[dict, ...]:
    """All cautions of one fit: the whole fit, each group's line, the correlation."""
    out = [few_taxa(n)]
    for g in groups or []:
        if g.get("slope") is not None:
            out.append(few_taxa(int(g["n"]), str(g["group"])))
    if X is not None and Y is not None:
        out.append(weak_correlation(method, X, Y))
    return tuple(c for c in out if c is not None)


def caution_lines(cautions: Sequence[dict]) -> list[str]:
    """The cautions for people, one line each; the groups with few taxa share one line."""
    groups = [c for c in cautions if c["rule"] == "few_taxa" and c.get("group") is not None]
    out = [c["message"] for c in cautions if c not in groups]
    if groups:
        named = ", ".join(f"{c['group']} ({c['n']})" for c in groups)
        out.append(
            f"groups with fewer than {MIN_TAXA} taxa (a rule of thumb for a scaling "
            f"exponent), whose own exponents rest on few points: {named}"
        )
    return out
