"""Quantiles of Student's t and of F(1, m) and F(2, m), exact for whole degrees of freedom.

Every confidence interval and flag cut-off of an everyday fit needs a t quantile:
the SMA and MA intervals (F(1, n - 2) = t(n - 2)^2), the intercept interval, the
Bonferroni cut-off of the studentized residuals, and Cook's F(2, n - 2) median.
scipy.special answers all of them, but importing it takes about as long as
importing pandas, which is most of what a sub-second command can spend. For a whole
number of degrees of freedom the t distribution function is a finite sum
(Abramowitz & Stegun 1964, 26.7.3 and 26.7.4), so the quantile is found here by
Newton's method on that sum, with the exact density, to the last few units of the
last place. Other degrees of freedom (fractional, or above :data:`EXACT_DF_MAX`, where
the sum grows long) go to scipy.special. The tests compare every answer with
scipy.special and with published tables.

All quantities are dimensionless.
"""

from __future__ import annotations

import math
from functools import lru_cache

EXACT_DF_MAX = 1000  # above this, the sums (df / 2 terms and more) are left to scipy.special


def _ratio(k: int, even: bool) -> float:
    """c_k / c_(k-1) = (2k - 1) / (2k) (even df) or d_k / d_(k-1) = 2k / (2k + 1) (odd df)."""
    return (2 * k - 1) / (2 * k) if even else (2 * k) / (2 * k + 1)


def _two_sided(t: float, df: int) -> tuple[float, float]:
    """A = P(|T| <= t) and its complement Q = 1 - A for t >= 0, each without cancellation.

    With theta = arctan(t / sqrt(df)), s = sin theta, c = cos theta, x = c^2, A is the finite
    sum of Abramowitz & Stegun (1964) 26.7.3 (odd df) or 26.7.4 (even df). The infinite
    series the finite sums are partial sums of add up to 1 (even df:
    s * sum_k c_k x^k = s (1 - x)^(-1/2)) and to pi/2 - theta (odd df:
    s * sum_k d_k c^(2k+1) = arcsin c), so when A > 1/2 the complement is the remainder
    of that series, which is summed directly (its terms fall by a factor x or less).
    """
    theta = math.atan2(t, math.sqrt(df))
    r = math.hypot(t, math.sqrt(df))
    s, c = t / r, math.sqrt(df) / r  # not sin/cos of theta: cos loses digits near pi/2
    x = df / (df + t * t)
    even = df % 2 == 0
    m = df // 2
    if df == 1:
        a, q = 2.0 * theta / math.pi, 2.0 * math.atan2(1.0, t) / math.pi
        return a, q
    terms = []  # term_k = c_k x^k (even df) or d_k c^(2k+1) (odd df); c_0 = d_0 = 1
    term = 1.0 if even else c
    for k in range(m):
        if k:
            term *= x * _ratio(k, even)
        terms.append(term)
    if even:
        a = s * math.fsum(terms)
    else:
        a = 2.0 / math.pi * (theta + s * math.fsum(terms))
    a = min(max(a, 0.0), 1.0)
    if a <= 0.5:
        return a, 1.0 - a
    rest = []  # the remainder of the series, from k = m (m >= 1 here)
    k = m
    term *= x * _ratio(k, even)
    while term > 1e-18 * (rest[0] if rest else term) and len(rest) < 1_000_000:
        rest.append(term)
        k += 1
        term *= x * _ratio(k, even)
    q = s * math.fsum(rest) if even else 2.0 / math.pi * s * math.fsum(rest)
    return 1.0 - q, q


def _density(t: float, df: int) -> float:
    """Student's t density at t."""
    logc = math.lgamma((df + 1) / 2) - math.lgamma(df / 2) - 0.5 * math.log(df * math.pi)
    return math.exp(logc - (df + 1) / 2 * math.log1p(t * t / df))


@lru_cache(maxsize=4096)  # a pure function; fits of one table ask again and again for a few
def _exact(df: int, q: float) -> float:
    """t quantile for whole df and 0.5 < q < 1 by Newton's method, kept inside a bracket:
    on A(t) = 2q - 1 while that is at most 1/2, else on Q(t) = 2(1 - q) (both sides exact
    in floating point for q >= 1/2), started from the normal quantile."""
    from statistics import NormalDist

    central = 2.0 * q - 1.0
    tail = 2.0 * (1.0 - q)
    lo, hi = 0.0, math.inf
    t = max(NormalDist().inv_cdf(q), 1e-300)
    for _ in range(200):
        a, comp = _two_sided(t, df)
        g = a - central if central <= 0.5 else tail - comp  # increasing in t
        if g == 0:
            return t
        if g < 0:
            lo = t
        else:
            hi = t
        new = t - g / (2.0 * _density(t, df))
        if not (lo < new < hi):  # Newton left the bracket: bisect (or double while unbounded)
            new = 2.0 * t if math.isinf(hi) else 0.5 * (lo + hi)
        if abs(new - t) <= 2e-16 * new or (math.isfinite(hi) and hi - lo <= 2e-16 * hi):
            return new
        t = new
    return t


def t_quantile(df: float, q: float) -> float:
    """The q quantile of Student's t with *df* degrees of freedom (dimensionless).

    Exact (to a few units of the last place) for whole df up to :data:`EXACT_DF_MAX`;
    otherwise ``scipy.special.stdtrit``. NaN when df <= 0 or q is outside (0, 1).
    """
    if not (df > 0) or not (0.0 < q < 1.0):  # NaN fails both comparisons
        return math.nan
    if float(df).is_integer() and df <= EXACT_DF_MAX:
        if q == 0.5:
            return 0.0
        if q < 0.5:
            return -_exact(int(df), 1.0 - q)
        return _exact(int(df), q)
    from scipy.special import stdtrit

    return float(stdtrit(df, q))


def f_quantile(d1: float, d2: float, q: float) -> float:
    """The q quantile of F(d1, d2) (dimensionless).

    d1 = 1: t(d2; (1 + q) / 2)^2. d1 = 2: the closed form (d2 / 2)((1 - q)^(-2/d2) - 1) of
    the distribution function 1 - (1 + 2x/d2)^(-d2/2). Otherwise ``scipy.special.fdtri``.
    """
    if not (d1 > 0 and d2 > 0) or not (0.0 < q < 1.0):
        return math.nan
    if d1 == 1 and float(d2).is_integer() and d2 <= EXACT_DF_MAX:
        return t_quantile(d2, 0.5 + q / 2) ** 2
    if d1 == 2:
        return d2 / 2 * math.expm1(-2.0 / d2 * math.log1p(-q))
    from scipy.special import fdtri

    return float(fdtri(d1, d2, q))
