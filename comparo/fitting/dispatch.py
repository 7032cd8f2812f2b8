"""One line by method name: the single place that maps ols/sma/ma/robust/lts to its fitting
function."""

from __future__ import annotations

import numpy as np

from comparo.base.errors import UsageError
from comparo.fitting.core import METHODS, Core
from comparo.fitting.least_squares import ols_line
from comparo.fitting.model2 import model2_line
from comparo.fitting.robust import huber_line, lts_line


def line_core(
    method: str, X: np.ndarray, Y: np.ndarray, ci: float, against: float | None, seed: int
) -> Core:
    """The fitted-line record of *method* on arrays X, Y (fitted scale) at level *ci*, testing
    slope *against*."""
    if method == "ols":
        return ols_line(X, Y, ci, against)
    if method in ("sma", "ma"):
        return model2_line(X, Y, method, ci, against)
    if method == "robust":
        return huber_line(X, Y, ci, against)
    if method == "lts":
        return lts_line(X, Y, ci, against, seed)
    raise UsageError(f"unknown method {method!r}; choose one of {', '.join(METHODS)}")
