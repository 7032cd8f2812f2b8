"""JSON-safe numbers and the short number formats of printed summaries."""

from __future__ import annotations

from typing import Any

from comparo.base.jsonsafe import finite_or_none as _num
from comparo.base.numbers import number

_NAN = float("nan")


def _nan(v: Any) -> float:
    return _NAN if v is None else float(v)


def _pair(p: Any) -> list | None:
    if p is None:
        return None
    return [_num(p[0]), _num(p[1])]


def _f(v: Any) -> str:
    return number(v, 5, "-")


def _p(p: Any) -> str:
    return number(p, 3, "-")
