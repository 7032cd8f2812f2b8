"""Broken-line (segmented) fit at the global least-squares breakpoint, with Davies' test.

Muggeo, V. M. R. (2003). Estimating regression models with unknown break-
    points. Statistics in Medicine 22, 3055-3071.
Davies, R. B. (1987). Hypothesis testing when a nuisance parameter is present
    only under the alternative. Biometrika 74, 33-43.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from comparo.base.errors import UsageError
from comparo.fitting.numbers import NAN


def segmented_line(
    X: np.ndarray, Y: np.ndarray, ci: float = 0.95, psi0: float | None = None, n_grid: int = 10
) -> dict:
    """Broken-line fit Y = b0 + b1 X + b2 (X - psi)_+ (Muggeo 2003) with Davies' test.

    The breakpoint is the global least-squares optimum over the interior data
    range: at least :data:`MIN_DISTINCT_SIDE` (3) distinct x values at or below psi and as
    many at or above it, i.e. psi between the 3rd smallest and the 3rd largest *distinct* x
    (tied x count once, so three equal x at an end never leave a side without a slope).
    It is found by
    :func:`_global_breakpoint`: the profile RSS is smooth between consecutive
    data values, so each such interval is minimised by bounded Brent search and
    the best of these (and of a 200-point grid, and of ``psi0`` if given) wins.
    Muggeo's iteration is not used to locate it: it can cycle (period 3 seen in
    simulation) and stop above the optimum.

    Notes
    -----
    At the optimum, Muggeo's (2003) linearisation, OLS on [1, X, U, V] with
    U = (X - psi)_+ and V = -I(X > psi), gives se(psi) = se(gamma)/|b2| and the CI
    psi -/+ t(ci; n - 4) se(psi). The intercept, the slopes b1 (left) and b1 + b2 (right)
    and the RSS are those of the least-squares broken line at psi-hat (three columns); the
    linearisation supplies only the standard errors, so the t(n - 4) CIs are centred on the
    broken line's own slopes (where psi-hat sits on a data value the linearisation's step
    term is not zero and its slopes differ from the fitted line's).
    Davies (1987) test of b2 = 0 with psi absent under H0: S_k = Wald t of b2 at ``n_grid``
    points evenly spread over the interior range; M = max |S_k|, V = sum |S_k - S_(k-1)|,
    two-sided p ~ 2 [Phi(-M) + V exp(-M^2/2)/sqrt(8 pi)] (an upper bound, capped at 1).
    """
    import statsmodels.api as sm
    from scipy import stats

    n = len(X)
    lo_b, hi_b = breakpoint_range(X)

    def rss(psi: float) -> float:
        return broken_line_at(X, Y, psi)[1]

    psi = _global_breakpoint(rss, X, lo_b, hi_b, psi0)
    coef, rss_hat = broken_line_at(X, Y, psi)  # the fitted broken line: its numbers are reported
    b0, b1, b2 = (float(c) for c in coef)
    U = np.clip(X - psi, 0, None)
    V = -(X > psi).astype(float)
    res = sm.OLS(
        Y, np.column_stack([np.ones(n), X, U, V])
    ).fit()  # Muggeo's linearisation: SEs only
    cov = np.asarray(res.cov_params())
    se_psi = float(res.bse[3] / abs(res.params[2])) if res.params[2] != 0 else NAN
    tq = stats.t.ppf(0.5 + ci / 2, n - 4)
    se_right = math.sqrt(cov[1, 1] + cov[2, 2] + 2 * cov[1, 2])
    # Davies' test
    S = []
    for g in np.linspace(lo_b, hi_b, n_grid + 2)[1:-1]:
        r = sm.OLS(Y, np.column_stack([np.ones(n), X, np.clip(X - g, 0, None)])).fit()
        S.append(r.tvalues[2])
    S = np.asarray(S)
    M = float(np.max(np.abs(S)))
    Vt = float(np.sum(np.abs(np.diff(S))))
    p = min(1.0, 2 * (stats.norm.sf(M) + Vt * math.exp(-M * M / 2) / math.sqrt(8 * math.pi)))
    return {
        "x_log": float(psi),
        "x_log_ci": [float(psi - tq * se_psi), float(psi + tq * se_psi)],
        "se_x_log": se_psi,
        "slope_left": b1,
        "slope_left_ci": [b1 - tq * float(res.bse[1]), b1 + tq * float(res.bse[1])],
        "slope_right": float(b1 + b2),
        "slope_right_ci": [float(b1 + b2 - tq * se_right), float(b1 + b2 + tq * se_right)],
        "intercept": b0,
        "rss": rss_hat,
        "p_single_line": float(p),
        "davies_max_abs_t": M,
    }


MIN_DISTINCT_SIDE = 3  # distinct x values at or below, and at or above, a breakpoint


def breakpoint_range(X: np.ndarray) -> tuple[float, float]:
    """The range of admissible breakpoints (fitted scale): from the
    :data:`MIN_DISTINCT_SIDE`-th smallest to the :data:`MIN_DISTINCT_SIDE`-th largest
    distinct x, so that each side holds at least that many distinct x (a value at psi
    counts on both sides) and the design [1, x, (x - psi)+] has full rank.

    Raises
    ------
    UsageError
        With fewer than 2 * MIN_DISTINCT_SIDE distinct x values (no interval is left).
    """
    u = np.unique(np.asarray(X, float))
    k = MIN_DISTINCT_SIDE
    if len(u) < 2 * k:
        raise UsageError(
            f"a breakpoint needs at least {k} distinct x values on each side "
            f"({2 * k} distinct in all); the usable data have {len(u)} distinct x values"
        )
    return float(u[k - 1]), float(u[-k])


def broken_line_at(X: np.ndarray, Y: np.ndarray, psi: float) -> tuple[np.ndarray, float]:
    """Least-squares broken line Y = b0 + b1 X + b2 (X - psi)+ at a given psi.

    Returns the coefficients (b0, b1, b2) and the residual sum of squares, computed from
    the residuals themselves (numpy's lstsq returns no residual sum for a rank-deficient
    design, which must never read as a perfect fit).
    """
    d = np.column_stack([np.ones(len(X)), X, np.clip(X - psi, 0, None)])
    coef = np.linalg.lstsq(d, Y, rcond=None)[0]
    r = Y - d @ coef
    return coef, float(r @ r)


def _global_breakpoint(
    rss: Callable[[float], float],
    X: np.ndarray,
    lo: float,
    hi: float,
    psi0: float | None = None,
    max_intervals: int = 400,
) -> float:
    """The psi in [lo, hi] minimising the profile RSS of a broken line (fitted scale).

    Between consecutive distinct data values the profile RSS is a smooth function of
    psi; each interval is minimised by bounded Brent search (scipy ``minimize_scalar``).
    With more than ``max_intervals`` intervals, a 400-point grid is refined around its
    8 best points instead. The result is never worse than any grid point or ``psi0``.
    """
    from scipy.optimize import minimize_scalar

    grid = np.linspace(lo, hi, 200)
    inner = np.unique(X[(X > lo) & (X < hi)])
    edges = np.unique(np.concatenate([[lo, hi], inner]))
    if len(edges) - 1 > max_intervals:
        fine = np.linspace(lo, hi, 401)
        vals = np.array([rss(g) for g in fine])
        keep = np.argsort(vals)[:8]
        spans = [(fine[max(k - 1, 0)], fine[min(k + 1, len(fine) - 1)]) for k in keep]
    else:
        spans = list(zip(edges[:-1], edges[1:], strict=True))
    cands = [float(g) for g in grid] + [float(e) for e in edges]
    if psi0 is not None and lo <= psi0 <= hi:
        cands.append(float(psi0))
    tol = 1e-10 * max(1.0, hi - lo)
    for a, b in spans:
        if b - a <= tol:
            continue
        opt = minimize_scalar(rss, bounds=(a, b), method="bounded", options={"xatol": tol})
        cands.append(float(opt.x))
    vals = [rss(c) for c in cands]
    return cands[int(np.argmin(vals))]
