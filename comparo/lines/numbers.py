"""JSON-safe numbers and the short number formats of printed summaries.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

_NAN = float("nan")


def _nan(v: Any) -> float:
    return _NAN if v is None else float(v)


def _num(v: Any) -> float | None:
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def _pair(p: Any) -> list | None:
    if p is None:
        return None
    return [_num(p[0]), _num(p[1])]


def _json(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _json(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_json(v) for v in obj]
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    return obj


def _f(v: Any) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return f"{v:.5g}"


def _p(p: Any) -> str:
    if p is None or not math.isfinite(p):
        return "-"
    return f"{p:.3g}"
