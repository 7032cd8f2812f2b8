"""Ordinary least squares of Y on X (model I), with t-based intervals and the t test of the
slope."""

from __future__ import annotations

import numpy as np

from comparo.fitting.core import Core


def ols_line(X: np.ndarray, Y: np.ndarray, ci: float = 0.95, against: float | None = None) -> Core:
    """OLS of Y on X with t-based CIs and the t test of slope = against.

    se(b) = s_e / (s_X sqrt(n - 1)), s_e^2 = RSS/(n - 2); t = (b - b0)/se(b) ~ t(n - 2).
    """
    import statsmodels.api as sm
    from scipy import stats

    res = sm.OLS(Y, sm.add_constant(X, has_constant="add")).fit()
    lo, hi = np.asarray(res.conf_int(alpha=1 - ci)).T
    a, b = res.params
    test = None
    if against is not None:
        t = (b - against) / res.bse[1]
        test = {
            "value": float(against),
            "statistic": float(t),
            "test": "t",
            "df": int(res.df_resid),
            "p": float(2 * stats.t.sf(abs(t), res.df_resid)),
        }
    return Core(
        float(b),
        (float(lo[1]), float(hi[1])),
        float(a),
        (float(lo[0]), float(hi[0])),
        float(res.rsquared),
        test,
        res.fittedvalues,
    )
