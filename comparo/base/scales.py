"""The one log transform of comparo: the fitted scale of a line (``log`` = ``"10"``, ``"e"`` or
``"none"``), its inverse and a standard uncertainty carried onto it.

Scaling lines are fitted on log10 (or natural log) values, so that y = a x^b becomes the
straight line log y = log a + b log x (Huxley 1932; Warton et al. 2006, Biol. Rev. 81,
259-291). numpy is imported inside the functions, so importing this module costs nothing.
"""

from __future__ import annotations

from typing import Any

#: the values of a fit's ``log`` option: base-10 logarithm, natural logarithm, none
LOG_SCALES = ("10", "e", "none")


def to_scale(values: Any, log: str) -> Any:
    """*values* (data units) on the fitted scale as a float array: log10, ln or unchanged.

    Zero gives -inf and negative values NaN, without a warning: callers exclude non-positive
    values with a reason before they fit (``log`` other than ``"none"``)."""
    import numpy as np

    a = np.asarray(values, dtype=float)
    if log == "none":
        return a
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.log10(a) if log == "10" else np.log(a)


def from_scale(values: Any, log: str) -> Any:
    """Fitted-scale *values* back in data units: 10^v, e^v or unchanged (float array)."""
    import numpy as np

    a = np.asarray(values, dtype=float)
    if log == "none":
        return a
    with np.errstate(over="ignore"):
        return np.power(10.0, a) if log == "10" else np.exp(a)


def se_on_scale(u: Any, v: Any, log: str) -> Any:
    """Standard uncertainty *u* of values *v* carried onto the fitted scale (first order):
    u / (v ln 10), u / v or u."""
    import math

    if log == "10":
        return u / (v * math.log(10.0))
    if log == "e":
        return u / v
    return u
