"""Case-resampling bootstrap of a line: percentile and BCa intervals (Efron 1987).

Efron, B. (1987). Better bootstrap confidence intervals. Journal of the
    American Statistical Association 82, 171-185.
"""

from __future__ import annotations

import numpy as np

from comparo.base.progress import ProgressBar
from comparo.fitting.core import slope_from_moments
from comparo.fitting.dispatch import line_core
from comparo.fitting.numbers import NAN


def _bca(theta_hat: float, boots: np.ndarray, jack: np.ndarray, ci: float) -> tuple[float, float]:
    """BCa interval (Efron 1987) from bootstrap replicates and jackknife values."""
    from scipy import stats

    boots = boots[np.isfinite(boots)]
    if len(boots) == 0:
        return (NAN, NAN)
    prop = (np.sum(boots < theta_hat) + 0.5 * np.sum(boots == theta_hat)) / len(boots)
    prop = min(max(prop, 1.0 / (2 * len(boots))), 1 - 1.0 / (2 * len(boots)))
    z0 = stats.norm.ppf(prop)
    d = jack.mean() - jack
    den = 6.0 * (np.sum(d * d)) ** 1.5
    acc = float(np.sum(d**3) / den) if den > 0 else 0.0
    zs = stats.norm.ppf([(1 - ci) / 2, (1 + ci) / 2])
    alphas = stats.norm.cdf(z0 + (z0 + zs) / (1 - acc * (z0 + zs)))
    lo, hi = np.quantile(boots, alphas)
    return (float(lo), float(hi))


def jackknife_moments(method: str, X: np.ndarray, Y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Leave-one-out slopes and intercepts from running sums (no loop)."""
    n = len(X)
    sx, sy = X.sum() - X, Y.sum() - Y
    sxx, syy, sxy = (X * X).sum() - X * X, (Y * Y).sum() - Y * Y, (X * Y).sum() - X * Y
    m = n - 1
    xm, ym = sx / m, sy / m
    cxx, cyy, cxy = sxx - m * xm * xm, syy - m * ym * ym, sxy - m * xm * ym
    b = slope_from_moments(method, cxx, cyy, cxy)
    return b, ym - b * xm


def _resample_lines(
    method: str, idx: np.ndarray, xc: np.ndarray, yc: np.ndarray, cross: np.ndarray
):
    """Slopes and intercepts (centred scale) of many resamples at once.

    ``idx`` holds one resample per row. Each row's counts of every point come
    from one ``bincount``; the resample sums of x, y, x^2, y^2, xy are then one
    matrix product, counts @ [x, y, x^2, y^2, xy].
    """
    rows, n = idx.shape
    offsets = (n * np.arange(rows, dtype=np.int64))[:, None]
    counts = np.bincount((idx + offsets).ravel(), minlength=rows * n).reshape(rows, n)
    sums = counts @ cross
    xm, ym = sums[:, 0] / n, sums[:, 1] / n
    sxx = (sums[:, 2] - n * xm * xm) / (n - 1)
    syy = (sums[:, 3] - n * ym * ym) / (n - 1)
    sxy = (sums[:, 4] - n * xm * ym) / (n - 1)
    tiny = 1e-12 * max(float(np.mean(cross[:, 2])), 1e-300)
    b = np.where(sxx > tiny, slope_from_moments(method, sxx, syy, sxy), NAN)
    return b, ym - b * xm


def bootstrap_line(
    method: str,
    X: np.ndarray,
    Y: np.ndarray,
    n_boot: int,
    *,
    ci: float = 0.95,
    seed: int = 20240601,
    progress: bool = False,
    chunk_elems: int = 2_000_000,
) -> dict:
    """Case-resampling bootstrap of slope and intercept: percentile and BCa intervals.

    For ols, sma and ma the resamples are drawn as an index matrix and their
    moments computed with numpy in chunks (no Python loop per resample);
    robust and lts refit each resample. Resamples with all x equal are
    dropped and counted.

    Returns
    -------
    dict
        ``{"resamples", "seed", "dropped", "slope": {"percentile", "bca"},
        "intercept": {...}}``.
    """
    n = len(X)
    rng = np.random.default_rng(seed)
    est = line_core(method, X, Y, ci, None, seed)
    slopes = np.empty(n_boot)
    ints = np.empty(n_boot)
    vector = method in ("ols", "sma", "ma")
    # centre on the sample means (shift-invariant slopes; keeps the raw-sum moments accurate)
    x0, y0 = float(X.mean()), float(Y.mean())
    xc, yc = X - x0, Y - y0
    cross = np.column_stack([xc, yc, xc * xc, yc * yc, xc * yc])
    step = max(1, chunk_elems // n) if vector else max(1, n_boot // 50)
    with ProgressBar(progress, f"bootstrap {method}", n_boot) as bar:
        for start in range(0, n_boot, step):
            stop = min(n_boot, start + step)
            idx = rng.integers(0, n, size=(stop - start, n), dtype=np.int32)
            if vector:
                b, a = _resample_lines(method, idx, xc, yc, cross)
                slopes[start:stop], ints[start:stop] = b, a + y0 - b * x0
            else:
                for k, row in enumerate(idx):
                    xb, yb = X[row], Y[row]
                    if np.ptp(xb) == 0 or len(np.unique(xb)) < 3:
                        slopes[start + k] = ints[start + k] = NAN
                        continue
                    c = line_core(method, xb, yb, ci, None, seed)
                    slopes[start + k], ints[start + k] = c.slope, c.intercept
            bar.advance(stop - start)
    if vector:
        jb, ja = jackknife_moments(method, X, Y)
    else:
        jb, ja = np.empty(n), np.empty(n)
        for i in range(n):
            m = np.arange(n) != i
            c = line_core(method, X[m], Y[m], ci, None, seed)
            jb[i], ja[i] = c.slope, c.intercept
    ok = np.isfinite(slopes)
    lo_q, hi_q = (1 - ci) / 2, (1 + ci) / 2
    out: dict = {"resamples": int(n_boot), "seed": int(seed), "dropped": int((~ok).sum())}
    for name, reps, jack, hat in (
        ("slope", slopes[ok], jb, est.slope),
        ("intercept", ints[ok], ja, est.intercept),
    ):
        per = np.quantile(reps, [lo_q, hi_q]) if len(reps) else [NAN, NAN]
        out[name] = {
            "percentile": [float(per[0]), float(per[1])],
            "bca": list(_bca(hat, reps, jack, ci)),
        }
    return out
