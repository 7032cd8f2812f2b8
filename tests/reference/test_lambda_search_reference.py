"""The lambda search of comparo.phylo against scipy.optimize (an independent,
general-purpose library): its Brent minimiser and root finder against
``minimize_scalar(method="bounded")`` and ``brentq``, and the whole lambda-ML fit
against the same search done with scipy on the same profile likelihood (grid of 11,
bounded Brent refinement around the best point, profile-interval roots on the grid's
brackets), on seeded random trees.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy.optimize import brentq, minimize_scalar
from scipy.stats import chi2

from comparo import phylo
from comparo.phylo.likelihood import LAMBDA_XTOL, _ll, gls
from comparo.phylo.search import minimize_bounded, root_bracketed

FUNCS = [
    (lambda v: (v - 0.3) ** 2, 0.0, 1.0),
    (lambda v: -math.log(v + 1e-3) + 4.0 * v, 0.0, 1.0),  # interior minimum at 0.249
    (lambda v: v, 0.0, 0.1),  # minimum at the left end
    (lambda v: -v * v, 0.9, 1.0),  # at the right end
    (lambda v: math.sin(3.0 * v) + 0.1 * v, -2.0, 0.5),
    (lambda v: abs(v - 0.123456789), 0.0, 0.2),  # not smooth at its minimum
    (lambda v: (v - 5e-7) ** 2, 0.0, 0.1),  # within the tolerance of an end
]


@pytest.mark.parametrize("k", range(len(FUNCS)))
@pytest.mark.parametrize("xatol", [1e-6, 1e-9])
def test_brent_minimiser_equals_scipys_bounded_search(k, xatol):
    """The same algorithm (Brent 1973) with the same stopping rule: the same point to
    rounding, and within xatol of the true minimiser."""
    f, a, b = FUNCS[k]
    ours = minimize_bounded(f, a, b, xatol)
    ref = minimize_scalar(f, bounds=(a, b), method="bounded", options={"xatol": xatol}).x
    assert abs(ours - ref) <= 1e-12
    fine = np.linspace(a, b, 200001)
    true = fine[int(np.argmin([f(v) for v in fine]))]
    assert abs(ours - true) <= xatol + (b - a) / 200000


@pytest.mark.parametrize(
    "f,a,b,root",
    [
        (lambda v: v**3 - 2.0, 0.0, 3.0, 2.0 ** (1 / 3)),
        (lambda v: math.exp(v) - 5.0, -10.0, 10.0, math.log(5.0)),
        (
            lambda v: 2.0 * (10.0 - (10.0 - 40.0 * (v - 0.2) ** 2)) - 3.841459,
            0.2,
            1.0,
            0.2 + math.sqrt(3.841459 / 80.0),
        ),
        (lambda v: math.tanh(50.0 * (v - 0.01)), 0.0, 1.0, 0.01),
    ],
)
@pytest.mark.parametrize("xtol", [1e-6, 1e-10])
def test_brent_root_finder_agrees_with_brentq(f, a, b, root, xtol):
    """Both stop once the bracket is within xtol: each result is within xtol of the root."""
    ours = root_bracketed(f, a, b, xtol)
    assert abs(ours - root) <= xtol
    assert abs(ours - brentq(f, a, b, xtol=xtol)) <= xtol


def _scipy_search(ft, X, y, reml, ci=0.95):
    """The lambda-ML search done with scipy on comparo's profile likelihood."""
    cache = {}

    def ll(v):
        v = float(min(1.0, max(0.0, v)))
        if v not in cache:
            cache[v] = _ll(gls(ft, X, y, v, None, reml), reml)
        return cache[v]

    grid = np.linspace(0.0, 1.0, 11)
    vals = np.array([ll(v) for v in grid])
    i = int(np.argmax(vals))
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, 10)]
    res = minimize_scalar(
        lambda v: -ll(v), bounds=(lo, hi), method="bounded", options={"xatol": 1e-6}
    )
    lam, lmax = max(
        [(float(res.x), ll(float(res.x))), (float(grid[i]), float(vals[i]))], key=lambda t: t[1]
    )
    crit = chi2.ppf(ci, 1)

    def g(v):
        return 2.0 * (lmax - ll(v)) - crit

    lower, upper = 0.0, 1.0
    below = [v for v in grid if v < lam]
    for k in range(len(below) - 1, -1, -1):
        if g(below[k]) > 0:
            right = below[k + 1] if k + 1 < len(below) else lam
            lower = brentq(g, below[k], right, xtol=1e-6) if g(right) < 0 else right
            break
    above = [v for v in grid if v > lam]
    for k, v in enumerate(above):
        if g(v) > 0:
            left = above[k - 1] if k > 0 else lam
            upper = brentq(g, left, v, xtol=1e-6) if g(left) < 0 else left
            break
    fit = gls(ft, X, y, lam, None, reml)
    return lam, lmax, (lower, upper), fit


def _data(k, n, lam_true):
    nw = phylo.random_newick(n, 100 + k, ultrametric=(k % 2 == 0), polytomy=0.1 * (k % 3))
    ft = phylo.flat_tree(phylo.read_tree(nw))
    rng = np.random.default_rng(k)
    e = phylo.pagel_edges(ft, lam_true)

    def bm():  # Brownian motion on the lambda tree, root to tips (parents come later in ft)
        val = np.zeros(ft.n_nodes)
        for i in range(ft.n_nodes - 1, -1, -1):
            p = ft.parent[i]
            val[i] = (val[p] if p >= 0 else 0.0) + rng.normal() * math.sqrt(e[i])
        return val[: ft.n_tips]

    x = bm()
    y = 0.3 + 0.6 * x + bm()
    return nw, ft, pd.DataFrame({"taxon": list(ft.tips), "x": x, "y": y})


CASES = [
    (k, n, lam, reml)
    for k, (n, lam, reml) in enumerate(
        (n, lam, reml)
        for n in (8, 30, 200, 800)
        for lam in (0.0, 0.3, 0.8, 1.0)
        for reml in (False, True)
    )
]


@pytest.mark.parametrize("k,n,lam_true,reml", CASES)
def test_lambda_ml_fit_equals_the_same_search_done_with_scipy(k, n, lam_true, reml):
    """comparo skips the Brent search when the best grid point is an end of [0, 1] and
    the likelihood falls from it one tolerance inwards and at the search's first probe;
    everywhere else it runs the same search. Tolerances: lambda and the interval ends
    are searched to LAMBDA_XTOL = 1e-6 by both, so they agree within that (the interval
    ends within 2e-6: each root finder stops within 1e-6 of the root); slope, intercept,
    their SEs and the log-likelihood then agree to 1e-6 relative (the likelihood is flat
    at its maximum, and the estimates move by O(1) per unit of lambda)."""
    nw, ft, df = _data(k, n, lam_true)
    r = phylo.pgls(df, "x", "y", tree=nw, log="none", lambda_="ml", reml=reml)
    tips = list(df["taxon"])
    order = ft.index(tips)
    X = np.column_stack([np.ones(n), df["x"].to_numpy()[np.argsort(order)]])
    y = df["y"].to_numpy()[np.argsort(order)]
    lam, lmax, ci, fit = _scipy_search(ft, X, y, reml)
    assert LAMBDA_XTOL == 1e-6
    assert abs(r["lambda"] - lam) <= 1e-6
    assert abs(r["loglik"] - lmax) <= 1e-6 * abs(lmax)
    se = np.sqrt(np.diag(fit.cov))
    for key, want in (
        ("intercept", fit.beta[0]),
        ("slope", fit.beta[1]),
        ("intercept_se", se[0]),
        ("slope_se", se[1]),
    ):
        assert r[key] == pytest.approx(want, rel=1e-6, abs=1e-12), key
    assert abs(r["lambda_ci"][0] - ci[0]) <= 2e-6 and abs(r["lambda_ci"][1] - ci[1]) <= 2e-6
    assert r["lambda_tests"]["lambda_0"]["p"] == pytest.approx(
        chi2.sf(2 * (lmax - _ll(gls(ft, X, y, 0.0, None, reml), reml)), 1), rel=1e-6, abs=1e-12
    )
