"""JSON-safe numbers and the short number formats of printed summaries."""

from __future__ import annotations

from typing import Any

from comparo.base.jsonsafe import finite_or_none as num
from comparo.base.numbers import number

NAN = float("nan")


def as_float(v: Any) -> float:
    """*v* as a float (NaN for None)."""
    return NAN if v is None else float(v)


def pair(p: Any) -> list | None:
    """A JSON-safe [lo, hi] pair (None for None)."""
    if p is None:
        return None
    return [num(p[0]), num(p[1])]


def show(v: Any) -> str:
    """An estimate in printed summaries: 5 significant digits, '-' when missing."""
    return number(v, 5, "-")


def show_p(p: Any) -> str:
    """A p-value in printed summaries: 3 significant digits, '-' when missing."""
    return number(p, 3, "-")
