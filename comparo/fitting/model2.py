"""Model II lines (SMA, MA) with the exact intervals and the sign- and axis-aware slope test.

Warton, D. I., Wright, I. J., Falster, D. S. & Westoby, M. (2006). Bivariate
    line-fitting methods for allometry. Biological Reviews 81, 259-291.
Pitman, E. J. G. (1939). A note on normal correlation. Biometrika 31, 9-12.
"""

from __future__ import annotations

import math

import numpy as np

from comparo.base.numbers import number
from comparo.fitting.core import Core, moments, slope_from_moments
from comparo.fitting.numbers import NAN


def model2_test(X: np.ndarray, Y: np.ndarray, b0: float, method: str) -> tuple[float, float]:
    """Correlation-based test of slope = b0 for SMA or MA (Pitman 1939; Warton et al. 2006),
    aware of the sign and of the axis. Returns (F, p), F ~ F(1, n - 2).

    Notes
    -----
    Along the direction of angle t0 = arctan b0, rho = Y cos t0 - X sin t0 (the residual
    from a line of slope b0) is correlated with the fitted axis f only when the slope
    differs from b0; f = Y + b0 X for SMA, X cos t0 + Y sin t0 for MA. The plain statistic
    F = (n - 2) r^2 / (1 - r^2) cannot tell b0 from -b0 (SMA: it depends on b0^2) or the
    major from the minor axis (MA: it is the same at b0 and -1/b0). So:

    * SMA: the slope of an SMA line has the sign of r. A b0 of the other sign (or 0) is
      the limit b0 -> 0 of the same-sign side, where r(rho, f) -> 1: F = inf, p = 0.
    * MA: a direction nearer the minor axis than the major (more than 45 degrees from the
      fitted major axis) is tested as the 45-degree direction on its side, the closest a
      major axis can come to it: its p is that of the 45-degree direction.

    With these rules the exact intervals of :func:`model2_line` are exactly the slopes
    this test does not reject at the same level.
    """
    from scipy.special import fdtrc  # the F distribution, without importing scipy.stats

    n = len(X)
    X = np.asarray(X, dtype=float)
    Y = np.asarray(Y, dtype=float)
    if method == "sma":
        sxy = float(np.cov(X, Y)[0, 1])
        if b0 == 0 or (sxy != 0 and math.copysign(1.0, b0) != math.copysign(1.0, sxy)):
            return math.inf, 0.0
        rho, f = Y - b0 * X, Y + b0 * X
    else:
        _, _, sxx, syy, sxy = moments(X, Y)
        theta_hat = 0.5 * math.atan2(2.0 * sxy, sxx - syy)  # angle of the major axis
        t0 = math.atan(b0) if math.isfinite(b0) else math.pi / 2
        phi = (t0 - theta_hat + math.pi / 2) % math.pi - math.pi / 2  # in [-pi/2, pi/2)
        if abs(phi) > math.pi / 4:
            t0 = theta_hat + math.copysign(math.pi / 4, phi)
        rho = Y * math.cos(t0) - X * math.sin(t0)
        f = X * math.cos(t0) + Y * math.sin(t0)
    r = np.corrcoef(rho, f)[0, 1]
    if not np.isfinite(r):
        r = 0.0
    F = (n - 2) * r * r / (1 - r * r) if abs(r) < 1 else math.inf
    return float(F), float(fdtrc(1, n - 2, F))


def model2_line(
    X: np.ndarray, Y: np.ndarray, method: str, ci: float = 0.95, against: float | None = None
) -> Core:
    """SMA or MA line with the exact (bivariate-normal) CIs of Warton et al. (2006).

    Notes
    -----
    SMA: b = sign(r) s_Y/s_X; CI b (sqrt(B + 1) -/+ sqrt(B)), B = F(ci; 1, n - 2)(1 - r^2)/(n - 2).
    MA: theta = arctan b, Q = F(ci; 1, n - 2)(s_X^2 s_Y^2 - s_XY^2)/(n - 2),
    D = sqrt((s_Y^2 - s_X^2)^2 + 4 s_XY^2); limits tan(theta -/+ arcsin(2 sqrt(Q)/D)/2);
    when an angle limit passes +/-90 degrees the interval runs through vertical and is
    reported with low > high (and a note); unbounded (NaN, with a note) when
    2 sqrt(Q)/D >= 1. Both are exactly the slopes the sign- and axis-aware F test of
    :func:`model2_test` does not reject. Intercept a = Ybar - b Xbar with CI
    a -/+ t(n - 2) sqrt(s_rho^2/n + Xbar^2 Var b); Var b = b^2 (1 - r^2)/(n - 2) (SMA) or
    (1 + b^2)^2 l1 l2 / ((n - 2)(l1 - l2)^2) (MA; delta method on the angle, l1 > l2 the
    covariance eigenvalues).
    """
    from comparo.base.quantiles import f_quantile, t_quantile

    n = len(X)
    ci_note = None
    xm, ym, sxx, syy, sxy = moments(X, Y)
    r = max(
        -1.0, min(1.0, sxy / math.sqrt(sxx * syy))
    )  # rounding can push |r| past 1 on a perfect line
    b = float(slope_from_moments(method, sxx, syy, sxy))
    fq = f_quantile(1, n - 2, ci)
    if method == "sma":
        B = fq * (1 - r * r) / (n - 2)
        lims = sorted(
            (b * (math.sqrt(B + 1) - math.sqrt(B)), b * (math.sqrt(B + 1) + math.sqrt(B)))
        )
        var_b = b * b * (1 - r * r) / (n - 2)
    else:
        theta = math.atan(b)
        Q = max(0.0, fq * (sxx * syy - sxy * sxy) / (n - 2))
        D = math.sqrt((syy - sxx) ** 2 + 4 * sxy * sxy)
        ratio = 2 * math.sqrt(Q) / D if D > 0 else math.inf
        if ratio >= 1:
            lims = [NAN, NAN]
            ci_note = (
                "MA slope interval unbounded: at this level every direction is consistent with the "
                "data (the major axis is not determined); reported as missing"
            )
        else:
            half = 0.5 * math.asin(ratio)
            lo_t, hi_t = theta - half, theta + half
            lims = [math.tan(lo_t), math.tan(hi_t)]
            if lo_t <= -math.pi / 2 or hi_t >= math.pi / 2:
                ci_note = (
                    f"MA slope interval passes through vertical: slopes from "
                    f"{number(lims[0], 5, '-')} up to +infinity and from -infinity up to "
                    f"{number(lims[1], 5, '-')} (reported low > high)"
                )
        l1, l2 = 0.5 * (sxx + syy + D), max(0.0, 0.5 * (sxx + syy - D))
        var_b = (1 + b * b) ** 2 * l1 * l2 / ((n - 2) * (l1 - l2) ** 2) if l1 > l2 else math.inf
    a = float(ym - b * xm)
    s_rho2 = float(np.var(Y - b * X, ddof=1))
    half_a = t_quantile(n - 2, 0.5 + ci / 2) * math.sqrt(s_rho2 / n + xm * xm * var_b)
    test = None
    if against is not None:
        F, p = model2_test(X, Y, against, method)
        test = {
            "value": float(against),
            "statistic": F,
            "test": "F(1, n-2)",
            "df": [1, n - 2],
            "p": p,
        }
    note = ci_note  # the weak-correlation caution is the fit's (comparo.fitting.cautions)
    return Core(
        b,
        (float(lims[0]), float(lims[1])),
        a,
        (float(a - half_a), float(a + half_a)),
        float(r * r),
        test,
        a + b * X,
        note=note,
    )
