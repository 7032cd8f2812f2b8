"""JSON-safe floats for the phylogenetic results.
"""

from __future__ import annotations

import math
from typing import Any


def _f(v: Any) -> float | None:
    """A plain float, or None for NaN/inf/None (JSON-safe)."""
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def _fl(values: Any) -> list | None:
    if values is None:
        return None
    return [_f(v) for v in values]
