"""JSON-safe numbers and the short number formats of printed summaries."""

from __future__ import annotations

import math
from typing import Any

from comparo.base.jsonsafe import finite_or_none as _num

_NAN = float("nan")


def _nan(v: Any) -> float:
    return _NAN if v is None else float(v)


def _pair(p: Any) -> list | None:
    if p is None:
        return None
    return [_num(p[0]), _num(p[1])]


def _f(v: Any) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return f"{v:.5g}"


def _p(p: Any) -> str:
    if p is None or not math.isfinite(p):
        return "-"
    return f"{p:.3g}"
