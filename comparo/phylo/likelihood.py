"""GLS on a tree at a given lambda, with measurement error, ML or REML, and the search for
lambda with its profile interval and likelihood-ratio tests.

Freckleton RP, Harvey PH, Pagel M (2002) Phylogenetic analysis and comparative
data: a test and review of evidence. Am Nat 160:712-726.
Ives AR, Midford PE, Garland T (2007) Within-species variation and measurement
error in phylogenetic comparative methods. Syst Biol 56:252-270.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from comparo.base.errors import UsageError
from comparo.base.jsonsafe import finite_or_none as _f
from comparo.phylo.engine import GLSQuantities, gls_quantities
from comparo.phylo.flat import FlatTree, pagel_edges


@dataclass(frozen=True, eq=False)
class Gls:
    beta: np.ndarray
    cov: np.ndarray  # covariance of beta
    rss: float  # generalised RSS (y-Xb)'V⁻¹(y-Xb), V as scaled (= C(λ) without ME)
    rss_null: float  # same for the intercept-only model
    sigma2: float  # BM rate (REML estimate without ME, ML/REML optimum with ME)
    loglik_ml: float
    loglik_reml: float
    logdet: float


def _solve_from(gq: GLSQuantities, p: int) -> tuple[np.ndarray, np.ndarray, float, float, float]:
    """beta, X'V⁻¹X, RSS, intercept-only RSS and ln|X'V⁻¹X| from the root quantities
    of Z = [X | y] (X with p columns)."""
    W = gq.W
    XtX, Xty, yty = W[:p, :p], W[:p, p], W[p, p]
    beta = np.linalg.solve(XtX, Xty)
    rss = float(yty - Xty @ beta)
    rss = max(rss, 0.0)
    rss_null = float(yty - gq.q[p] ** 2 / gq.p)
    logdet_x = np.linalg.slogdet(XtX)[1]
    return beta, XtX, rss, rss_null, float(logdet_x)


def _gls_fixed(ft: FlatTree, X: np.ndarray, y: np.ndarray, lam: float) -> Gls:
    """GLS with V = sigma²·C(lambda), sigma² profiled out (no measurement error)."""
    n, p = X.shape
    gq = gls_quantities(ft, np.column_stack([X, y]), pagel_edges(ft, lam))
    beta, XtX, rss, rss_null, ldx = _solve_from(gq, p)
    s2_ml = rss / n
    s2_r = rss / (n - p) if n > p else math.nan
    tiny = 1e-300
    ll_ml = -0.5 * (n * math.log(2 * math.pi * max(s2_ml, tiny)) + gq.logdet + n)
    ll_r = (
        -0.5 * ((n - p) * math.log(2 * math.pi * max(s2_r, tiny)) + gq.logdet + ldx + (n - p))
        if n > p
        else math.nan
    )
    cov = s2_r * np.linalg.inv(XtX)
    return Gls(beta, cov, rss, rss_null, s2_r, ll_ml, ll_r, gq.logdet)


def _gls_me(
    ft: FlatTree, X: np.ndarray, y: np.ndarray, lam: float, s2: float, se2: np.ndarray
) -> Gls:
    """GLS with V = sigma²·C(lambda) + diag(se²) at a given sigma² (Ives et al. 2007)."""
    n, p = X.shape
    e = s2 * pagel_edges(ft, lam)
    e[:n] += se2
    gq = gls_quantities(ft, np.column_stack([X, y]), e)
    beta, XtX, rss, rss_null, ldx = _solve_from(gq, p)
    ll_ml = -0.5 * (n * math.log(2 * math.pi) + gq.logdet + rss)
    ll_r = -0.5 * ((n - p) * math.log(2 * math.pi) + gq.logdet + ldx + rss)
    return Gls(beta, np.linalg.inv(XtX), rss, rss_null, s2, ll_ml, ll_r, gq.logdet)


def gls(
    ft: FlatTree, X: np.ndarray, y: np.ndarray, lam: float, se2: np.ndarray | None, reml: bool
) -> Gls:
    """GLS at lambda; with measurement error, sigma² maximises the (RE)ML likelihood."""
    if se2 is None or not np.any(se2 > 0):
        return _gls_fixed(ft, X, y, lam)
    from comparo.phylo.search import minimize_bounded

    base = _gls_fixed(ft, X, y, lam)
    s0 = max(base.rss / X.shape[0], 1e-300)
    u0 = math.log(s0)

    def negll(u: float) -> float:
        g = _gls_me(ft, X, y, lam, math.exp(u), se2)
        return -(g.loglik_reml if reml else g.loglik_ml)

    u = minimize_bounded(negll, u0 - 25.0, u0 + 5.0, 1e-7)
    return _gls_me(ft, X, y, lam, math.exp(u), se2)


def _ll(g: Gls, reml: bool) -> float:
    return g.loglik_reml if reml else g.loglik_ml


@dataclass(frozen=True, eq=False)
class _LambdaFit:
    lam: float
    ci: tuple[float, float] | None
    loglik: float
    ll0: float | None
    ll1: float | None
    fit: Gls
    top: float | None  # upper end of the search (1, or 1 - 1e-6 with zero-length tip edges)


#: Absolute tolerance of the lambda search and of the ends of its profile interval.
LAMBDA_XTOL = 1e-6


def fit_lambda(
    ft: FlatTree,
    X: np.ndarray,
    y: np.ndarray,
    lambda_: Any,
    se2: np.ndarray | None,
    reml: bool,
    ci: float,
) -> _LambdaFit:
    """Pagel's lambda: fixed, or maximising the (RE)ML profile likelihood on [0, 1]
    (a grid of 11 points, then a bounded Brent refinement around the best, to
    :data:`LAMBDA_XTOL`), with the profile CI {lambda: 2(l_max - l(lambda)) <= chi²_1(ci)}
    (ends to the same tolerance). Every lambda is evaluated once (one linear-time pass)."""
    from statistics import NormalDist  # chi²_1 quantile = the squared normal one, no scipy

    if not (isinstance(lambda_, str) and lambda_.strip().lower() == "ml"):
        try:
            lam = float(lambda_)
        except (TypeError, ValueError):
            raise UsageError(
                f"--lambda must be 'ml' or a number in [0, 1], got {lambda_!r}"
            ) from None
        if not 0.0 <= lam <= 1.0:
            raise UsageError(f"--lambda must be in [0, 1], got {lam}")
        g = gls(ft, X, y, lam, se2, reml)
        return _LambdaFit(lam, None, _ll(g, reml), None, None, g, None)

    # a zero-length tip edge has zero variance at lambda = 1 (no measurement error):
    # the engine needs t > 0 there, so the search stops just short of 1
    zero = ft.length[: ft.n_tips] <= 0
    if se2 is not None:
        zero &= se2 <= 0
    top = 1.0 - 1e-6 if np.any(zero) else 1.0
    cache: dict[float, Gls] = {}

    def fit_at(lam: float) -> Gls:
        lam = float(min(top, max(0.0, lam)))
        if lam not in cache:
            cache[lam] = gls(ft, X, y, lam, se2, reml)
        return cache[lam]

    def ll(lam: float) -> float:
        return _ll(fit_at(lam), reml)

    grid = np.linspace(0.0, top, 11)
    vals = np.array([ll(v) for v in grid])
    lam_hat, ll_max = _maximise(ll, grid, vals)
    crit = NormalDist().inv_cdf(0.5 + ci / 2.0) ** 2  # chi²_1(ci)
    lower, upper = _profile_limits(ll, grid, sorted(cache), lam_hat, ll_max, crit, top)
    return _LambdaFit(
        lam_hat, (float(lower), float(upper)), ll_max, ll(0.0), ll(top), fit_at(lam_hat), top
    )


def _maximise(ll, grid: np.ndarray, vals: np.ndarray) -> tuple[float, float]:
    """The maximiser of *ll* around the best grid point: Brent's bounded search on the
    two grid intervals beside it, to :data:`LAMBDA_XTOL`.

    When the best grid point is an end of [0, top] and *ll* falls from it both one
    tolerance inwards and at the search's first probe (0.382 of the way to the next
    grid point), the end is the maximiser on that interval to within the tolerance
    (for a profile unimodal there, as the search itself assumes) and no search is run:
    the Brent search would only creep towards the end, about 25 evaluations for 1e-6."""
    from comparo.phylo.search import minimize_bounded

    i = int(np.nanargmax(vals))
    last = len(grid) - 1
    lo, hi = float(grid[max(i - 1, 0)]), float(grid[min(i + 1, last)])
    best = (float(grid[i]), float(vals[i]))
    if i in (0, last):
        inward = LAMBDA_XTOL if i == 0 else -LAMBDA_XTOL
        probe = lo + 0.5 * (3.0 - math.sqrt(5.0)) * (hi - lo)  # the search's first point
        if ll(best[0] + inward) <= best[1] and ll(probe) <= best[1]:
            return best
    x = minimize_bounded(lambda v: -ll(v), lo, hi, LAMBDA_XTOL)
    return max([(float(x), ll(float(x))), best], key=lambda t: t[1])


def _profile_limits(
    ll, grid: np.ndarray, seen: list[float], lam_hat: float, ll_max: float, crit: float, top: float
) -> tuple[float, float]:
    """Ends of the profile interval: on each side of *lam_hat*, the root of
    g = 2(l_max - l) - crit between the nearest grid point outside the region (g > 0)
    and the next grid point inwards, bracketed as tightly as the lambdas already
    evaluated (*seen*) allow; 0 or *top* when no grid point on that side is outside."""
    from comparo.phylo.search import root_bracketed

    def g(v: float) -> float:
        return 2.0 * (ll_max - ll(v)) - crit

    def root(out: float, inner: float) -> float:
        """Root between *out* (g > 0) and *inner* (the next grid point or lam_hat)."""
        if g(inner) >= 0:
            return inner
        d = 1.0 if inner > out else -1.0  # the direction from out to inner
        between = sorted(
            (v for v in seen if min(out, inner) < v < max(out, inner)), key=lambda v: d * v
        )
        for v in between:  # the known point outside the region nearest to inner
            if g(v) > 0:
                out = v
        inner = next(
            (v for v in between if d * v > d * out and g(v) <= 0), inner
        )  # then the nearest inside
        a, b = sorted((out, inner))
        return root_bracketed(g, a, b, LAMBDA_XTOL, g(a), g(b))

    lower, upper = 0.0, top
    below = [float(v) for v in grid if v < lam_hat]
    for k in range(len(below) - 1, -1, -1):
        if g(below[k]) > 0:
            lower = root(below[k], min(below[k + 1] if k + 1 < len(below) else lam_hat, lam_hat))
            break
    above = [float(v) for v in grid if v > lam_hat]
    for k, v in enumerate(above):
        if g(v) > 0:
            upper = root(v, max(above[k - 1] if k > 0 else lam_hat, lam_hat))
            break
    return lower, upper


def lr(ll_max: float, ll_h: float | None) -> dict | None:
    """Likelihood-ratio test of a fixed lambda; p from chi²_1. On the boundary of
    [0, 1] the null distribution is the 50:50 mixture of chi²_0 and chi²_1 (Self &
    Liang 1987, JASA 82:605-610), so this p is conservative (twice the mixture's)."""
    from scipy.special import chdtrc  # chi² upper tail, without importing scipy.stats

    if ll_h is None:
        return None
    stat = max(0.0, 2.0 * (ll_max - ll_h))
    return {"loglik": _f(ll_h), "statistic": _f(stat), "p": _f(chdtrc(1, stat))}
