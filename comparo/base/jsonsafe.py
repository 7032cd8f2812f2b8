"""JSON-safe numbers: NaN and infinity become None (JSON has neither), numpy scalars plain
Python values. Used by every result object's ``to_dict()``."""

from __future__ import annotations

import math
from typing import Any


def finite_or_none(v: Any) -> float | None:
    """A plain float, or None for NaN, infinity or None."""
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def finite_list(values: Any) -> list | None:
    """:func:`finite_or_none` of each value (None stays None)."""
    if values is None:
        return None
    return [finite_or_none(v) for v in values]


def json_safe(obj: Any) -> Any:
    """*obj* with dict keys as text, tuples as lists, numpy scalars as Python values and
    non-finite floats as None, recursively."""
    if isinstance(obj, dict):
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [json_safe(v) for v in obj]
    if type(obj).__module__ == "numpy":
        import numpy as np

        if isinstance(obj, np.generic):
            obj = obj.item()
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    return obj
