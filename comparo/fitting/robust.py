"""Lines that resist outliers: Huber M-estimation (Huber 1964) and (reweighted) least trimmed
squares (Rousseeuw 1984; Rousseeuw & Van Driessen 2006); full references in :mod:`comparo.fitting`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from comparo.fitting.core import Core
from comparo.fitting.least_squares import ols_line

HUBER_C = 1.345
LTS_CUT = 2.5


def huber_line(
    X: np.ndarray, Y: np.ndarray, ci: float = 0.95, against: float | None = None, c: float = HUBER_C
) -> Core:
    """Huber M-estimate (statsmodels RLM, MAD scale) with normal-theory CIs and weights.

    psi(u) = clip(u, -c, c); IRLS weights min(1, c/|u|). The test of slope = b0
    is the Wald z test with RLM's standard error.
    """
    import statsmodels.api as sm
    from scipy import stats

    exog = sm.add_constant(X, has_constant="add")
    res = sm.RLM(Y, exog, M=sm.robust.norms.HuberT(t=c)).fit()
    a, b = (float(v) for v in res.params)
    lo, hi = np.asarray(res.conf_int(alpha=1 - ci)).T
    w = np.broadcast_to(
        np.asarray(res.weights, dtype=float), np.shape(Y)
    ).copy()  # a scalar after a perfect fit
    yw = np.sum(w * Y) / np.sum(w)
    fitted = a + b * X
    r2 = 1 - np.sum(w * (Y - fitted) ** 2) / np.sum(w * (Y - yw) ** 2)
    test = None
    if against is not None:
        z = (b - against) / res.bse[1]
        test = {
            "value": float(against),
            "statistic": float(z),
            "test": "z",
            "df": None,
            "p": float(2 * stats.norm.sf(abs(z))),
        }
    return Core(
        b,
        (float(lo[1]), float(hi[1])),
        a,
        (float(lo[0]), float(hi[0])),
        float(r2),
        test,
        fitted,
        weights=w,
    )


def huber_slopes(
    X: np.ndarray, Y: np.ndarray, c: float = HUBER_C, max_iter: int = 50, tol: float = 1e-10
) -> np.ndarray:
    """Huber M-estimate slopes of many data sets at once (rows of X and Y).

    The IRLS of statsmodels RLM (HuberT, scale = median|r|/0.6745 re-estimated
    each step, OLS start), run for all rows together until no coefficient moves
    more than *tol* (or *max_iter* steps); matches :func:`huber_line` to about 1e-8. Written here
    rather than a loop over statsmodels for its speed on many draws (docs/architecture.md,
    "What we wrote ourselves, and why").
    """

    def wls(w):
        sw = w.sum(1, keepdims=True)
        xm, ym = (w * X).sum(1, keepdims=True) / sw, (w * Y).sum(1, keepdims=True) / sw
        b = (w * (X - xm) * (Y - ym)).sum(1) / (w * (X - xm) ** 2).sum(1)
        return ym[:, 0] - b * xm[:, 0], b

    a, b = wls(np.ones_like(X))
    for _ in range(max_iter):
        r = Y - a[:, None] - b[:, None] * X
        scale = np.median(np.abs(r), axis=1) / 0.6744897501960817
        with np.errstate(divide="ignore", invalid="ignore"):
            u = np.abs(r) / np.where(scale > 0, scale, 1.0)[:, None]
            w = np.where(u > c, c / u, 1.0)
        w[scale <= 0] = 1.0
        a2, b2 = wls(w)
        done = np.nanmax(np.abs(b2 - b)) <= tol and np.nanmax(np.abs(a2 - a)) <= tol
        a, b = a2, b2
        if done:
            break
    return b


@dataclass(frozen=True)
class LTSLine:
    """Raw least-trimmed-squares line and its scale.

    Attributes
    ----------
    intercept, slope : float
    h : int
        Points in the trimmed sum.
    objective : float
        Sum of the h smallest squared residuals.
    scale : float
        sqrt(objective/h) made consistent at the normal.
    subset : numpy.ndarray of bool
        The h points of the optimum.
    """

    intercept: float
    slope: float
    h: int
    objective: float
    scale: float
    subset: np.ndarray


def lts_fit(
    X: np.ndarray,
    Y: np.ndarray,
    h: int | None = None,
    *,
    max_starts: int = 3000,
    seed: int = 20240601,
    max_steps: int = 100,
) -> LTSLine:
    """Least trimmed squares line by concentration steps (Rousseeuw & Van Driessen 2006).

    Starts from every line through two points when there are at most
    ``max_starts`` such pairs, else from ``max_starts`` random pairs
    (``numpy.random.default_rng(seed)``); each start is refined by C-steps
    (OLS on its h smallest squared residuals) until the subset no longer
    changes; all starts are iterated together as arrays.

    Notes
    -----
    Minimises sum_{i <= h} r^2_(i), h = floor((n + p + 1)/2), p = 2 (Rousseeuw 1984).
    Scale: s = sqrt(objective/h) / sqrt(1 - 2 c phi(c)/q), q = h/n, c = Phi^-1((1 + q)/2),
    the variance of a standard normal truncated to its central fraction q.
    """
    from scipy import stats

    n = len(X)
    h = int(h or (n + 3) // 2)
    n_pairs = n * (n - 1) // 2
    if n_pairs <= max_starts:
        i, j = np.triu_indices(n, 1)
    else:
        rng = np.random.default_rng(seed)
        i = rng.integers(0, n, max_starts)
        j = (i + rng.integers(1, n, max_starts)) % n
    keep = X[i] != X[j]
    i, j = i[keep], j[keep]
    b = (Y[j] - Y[i]) / (X[j] - X[i])
    a = Y[i] - b * X[i]
    prev = None
    for _ in range(max_steps):
        r2 = (Y[None, :] - a[:, None] - b[:, None] * X[None, :]) ** 2
        idx = np.sort(np.argpartition(r2, h - 1, axis=1)[:, :h], axis=1)
        if prev is not None and np.array_equal(idx, prev):
            break
        prev = idx
        xs, ys = X[idx], Y[idx]
        xm, ym = xs.mean(axis=1), ys.mean(axis=1)
        sxx = ((xs - xm[:, None]) ** 2).sum(axis=1)
        sxy = ((xs - xm[:, None]) * (ys - ym[:, None])).sum(axis=1)
        ok = sxx > 0
        b = np.where(ok, sxy / np.where(ok, sxx, 1.0), b)
        a = np.where(ok, ym - b * xm, a)
    r2 = (Y[None, :] - a[:, None] - b[:, None] * X[None, :]) ** 2
    obj = np.partition(r2, h - 1, axis=1)[:, :h].sum(axis=1)
    k = int(np.argmin(obj))
    q = h / n
    c = stats.norm.ppf((1 + q) / 2)
    factor = math.sqrt(1 - 2 * c * stats.norm.pdf(c) / q) if q < 1 else 1.0
    scale = math.sqrt(obj[k] / h) / factor
    subset = np.zeros(n, dtype=bool)
    subset[np.argpartition(r2[k], h - 1)[:h]] = True
    return LTSLine(float(a[k]), float(b[k]), h, float(obj[k]), float(scale), subset)


def lts_line(
    X: np.ndarray,
    Y: np.ndarray,
    ci: float = 0.95,
    against: float | None = None,
    seed: int = 20240601,
) -> Core:
    """Reweighted LTS: raw LTS, then OLS on the points with |r/s| <= 2.5 (Rousseeuw & Leroy 1987).

    The reported line, CIs and test are those of the reweighted least-squares
    fit; the raw LTS line is kept in the note.
    """
    raw = lts_fit(X, Y, seed=seed)
    std = (Y - raw.intercept - raw.slope * X) / raw.scale if raw.scale > 0 else np.zeros_like(X)
    kept = np.abs(std) <= LTS_CUT
    if kept.sum() < 3 or np.ptp(X[kept]) == 0:
        kept = raw.subset
    core = ols_line(X[kept], Y[kept], ci, against)
    a, b = core.intercept, core.slope
    note = (
        f"LTS raw line (h = {raw.h}): intercept {raw.intercept:.5g}, slope {raw.slope:.5g}, scale "
        f"{raw.scale:.4g}; reweighted fit on {int(kept.sum())} of {len(X)} points"
    )
    return Core(
        b,
        core.slope_ci,
        a,
        core.intercept_ci,
        core.r2,
        core.test,
        a + b * X,
        weights=kept.astype(float),
        lts_std=std,
        note=note,
    )
