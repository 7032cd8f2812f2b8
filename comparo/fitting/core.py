"""The fitted-line record shared by every method, sample moments, and slopes from moments."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from comparo.base.scales import LOG_SCALES

METHODS = ("ols", "sma", "ma", "robust", "lts", "pgls")
LOGS = LOG_SCALES  # the values of a fit's log option (comparo.base.scales)


def moments(X: np.ndarray, Y: np.ndarray, axis: int = -1):
    """Means, variances and covariance (divisor n - 1) along *axis*."""
    n = X.shape[axis]
    xm = X.mean(axis=axis, keepdims=True)
    ym = Y.mean(axis=axis, keepdims=True)
    dx, dy = X - xm, Y - ym
    sxx = (dx * dx).sum(axis=axis) / (n - 1)
    syy = (dy * dy).sum(axis=axis) / (n - 1)
    sxy = (dx * dy).sum(axis=axis) / (n - 1)
    return np.squeeze(xm, axis), np.squeeze(ym, axis), sxx, syy, sxy


def slope_from_moments(method: str, sxx, syy, sxy):
    """OLS, SMA or MA slope from (arrays of) second moments.

    OLS s_xy/s_xx; SMA sign(s_xy) sqrt(s_yy/s_xx); MA
    [s_yy - s_xx + sqrt((s_yy - s_xx)^2 + 4 s_xy^2)] / (2 s_xy) (Warton et al. 2006, Table 4).
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        if method == "ols":
            return sxy / sxx
        if method == "sma":
            return np.sign(sxy) * np.sqrt(syy / sxx)
        if method == "ma":
            d = syy - sxx
            return (d + np.sqrt(d * d + 4.0 * sxy * sxy)) / (2.0 * sxy)
    raise ValueError(method)


@dataclass(frozen=True)
class Core:
    slope: float
    slope_ci: tuple[float, float]
    intercept: float
    intercept_ci: tuple[float, float]
    r2: float
    test: dict | None
    fitted: np.ndarray
    weights: np.ndarray | None = None
    lts_std: np.ndarray | None = None
    note: str | None = None
