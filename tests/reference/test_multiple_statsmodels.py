"""Multiple regression and model comparison against independent routes.

- OLS: statsmodels OLS (coefficients, standard errors, t, p, log-likelihood), with a factor
  coded by statsmodels' own formula interface (treatment coding).
- PGLS at a fixed lambda: statsmodels GLS with the dense Brownian-motion covariance C(lambda)
  built from dendropy's patristic distances, C_ij = (d_root,i + d_root,j - d_ij)/2
  (comparo's engine never forms C).
- PGLS with lambda by ML: a dense profile ML maximised with scipy.optimize.minimize_scalar.
- AICc = -2 lnL + 2k + 2k(k+1)/(n-k-1) and Akaike weights exp(-Delta/2)/sum, computed here
  from the formulas of Burnham & Anderson (2002, Model Selection and Multimodel Inference,
  2nd ed.) and Hurvich & Tsai (1989, Biometrika 76:297-307).
"""

from __future__ import annotations

import math

import dendropy
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from scipy.optimize import minimize_scalar

from comparo.fitting.comparison import compare
from comparo.fitting.multiple import multiple_fit
from comparo.phylo import random_newick


def dense_cov(newick: str) -> tuple[list[str], np.ndarray]:
    """BM covariance from dendropy's patristic distances (the independent route)."""
    tree = dendropy.Tree.get(data=newick, schema="newick", rooting="force-rooted")
    pdm = tree.phylogenetic_distance_matrix()
    leaves = list(tree.leaf_node_iter())
    depth = {nd.taxon.label: nd.distance_from_root() for nd in leaves}
    names = [nd.taxon.label for nd in leaves]
    n = len(names)
    C = np.empty((n, n))
    for i, a in enumerate(leaves):
        for j, b in enumerate(leaves):
            d = 0.0 if i == j else pdm.patristic_distance(a.taxon, b.taxon)
            C[i, j] = 0.5 * (depth[names[i]] + depth[names[j]] - d)
    return names, C


def pagel(C: np.ndarray, lam: float) -> np.ndarray:
    return lam * C + (1 - lam) * np.diag(np.diag(C))


def _table(
    n: int, seed: int, newick: str | None = None, lam: float = 1.0
) -> tuple[pd.DataFrame, np.ndarray | None]:
    """Three positive predictors, a three-level factor and y = a^0.6 b^-0.3 (seeded);
    with a tree, the error is Gaussian with covariance C(lam) (BM on the tree for lam = 1)."""
    rng = np.random.default_rng(seed)
    names = [f"t{i + 1}" for i in range(n)]
    C = None
    e = 0.15 * rng.normal(size=n)
    if newick is not None:
        names, C = dense_cov(newick)
        e = 0.15 * np.linalg.cholesky(pagel(C, lam)) @ rng.normal(size=n)
    la, lb, lc = rng.normal(size=(3, n))
    g = rng.choice(["alpha", "beta", "gamma"], size=n)
    ly = 0.3 + 0.6 * la - 0.3 * lb + 0.2 * (g == "beta") + e
    t = pd.DataFrame({"taxon": names, "a": 10**la, "b": 10**lb, "c": 10**lc, "g": g, "y": 10**ly})
    return t, C


def _check_terms(fit, res, names):
    got = {t["term"]: t for t in fit.terms}
    for name, sm_name in names:
        assert got[name]["estimate"] == pytest.approx(res.params[sm_name], rel=1e-9, abs=1e-12)
        assert got[name]["se"] == pytest.approx(res.bse[sm_name], rel=1e-9)
        assert got[name]["t"] == pytest.approx(res.tvalues[sm_name], rel=1e-9)
        assert got[name]["p"] == pytest.approx(res.pvalues[sm_name], rel=1e-7, abs=1e-300)
        lo, hi = res.conf_int(0.05).loc[sm_name]
        assert got[name]["ci"] == pytest.approx([lo, hi], rel=1e-9)


def test_ols_with_factor_matches_statsmodels_formula():
    """Coefficients, SEs, t, p, CIs and the ML log-likelihood against statsmodels OLS
    (treatment coding of g by the formula interface, reference 'alpha')."""
    t, _ = _table(45, 3)
    fit = multiple_fit(t, "y", ["a", "b", "c"], factor="g", method="ols")
    d = pd.DataFrame(
        {
            "ly": np.log10(t.y),
            "la": np.log10(t.a),
            "lb": np.log10(t.b),
            "lc": np.log10(t.c),
            "g": t.g,
        }
    )
    res = smf.ols("ly ~ la + lb + lc + C(g)", data=d).fit()
    _check_terms(
        fit,
        res,
        [
            ("intercept", "Intercept"),
            ("a", "la"),
            ("b", "lb"),
            ("c", "lc"),
            ("g[beta]", "C(g)[T.beta]"),
            ("g[gamma]", "C(g)[T.gamma]"),
        ],
    )
    assert fit.reference == "alpha"
    assert fit.loglik == pytest.approx(res.llf, rel=1e-12)
    n, k = 45, 6 + 1
    assert fit.k == k
    assert fit.aicc == pytest.approx(
        -2 * res.llf + 2 * k + 2 * k * (k + 1) / (n - k - 1), rel=1e-12
    )


@pytest.mark.parametrize("lam", [1.0, 0.4])
def test_pgls_fixed_lambda_matches_statsmodels_gls(lam):
    """Coefficients, SEs and the ML log-likelihood against statsmodels GLS with the dense
    C(lambda) (statsmodels' GLS log-likelihood is the ML one with sigma² profiled out)."""
    nw = random_newick(60, 11, ultrametric=True)
    t, C = _table(60, 5, nw)
    fit = multiple_fit(t, "y", ["a", "b"], factor="g", method="pgls", tree=nw, lambda_=lam)
    X = np.column_stack(
        [np.ones(60), np.log10(t.a), np.log10(t.b), t.g == "beta", t.g == "gamma"]
    ).astype(float)
    X = pd.DataFrame(X, columns=["const", "a", "b", "gb", "gc"])
    res = sm.GLS(np.log10(t.y).to_numpy(), X, sigma=pagel(C, lam)).fit()
    _check_terms(
        fit,
        res,
        [("intercept", "const"), ("a", "a"), ("b", "b"), ("g[beta]", "gb"), ("g[gamma]", "gc")],
    )
    assert fit.loglik == pytest.approx(res.llf, rel=1e-9)
    assert fit.k == 6 and fit.lambda_ == lam


def test_pgls_lambda_ml_matches_dense_profile_likelihood():
    """lambda by ML against the dense profile ML, -1/2[n ln(2 pi RSS/n) + ln|C(lambda)| + n],
    maximised over [0, 1] by scipy.optimize.minimize_scalar (bounded)."""
    nw = random_newick(70, 23, ultrametric=False)
    t, C = _table(70, 9, nw, lam=0.5)
    n = len(t)
    X = np.column_stack([np.ones(n), np.log10(t.a), np.log10(t.b), np.log10(t.c)])
    y = np.log10(t.y).to_numpy()

    def negll(lam):
        V = pagel(C, lam)
        Vi = np.linalg.inv(V)
        b = np.linalg.solve(X.T @ Vi @ X, X.T @ Vi @ y)
        r = y - X @ b
        rss = r @ Vi @ r
        return 0.5 * (n * math.log(2 * math.pi * rss / n) + np.linalg.slogdet(V)[1] + n)

    opt = minimize_scalar(negll, bounds=(0.0, 1.0), method="bounded", options={"xatol": 1e-8})
    fit = multiple_fit(t, "y", ["a", "b", "c"], method="pgls", tree=nw, lambda_="ml")
    assert fit.loglik == pytest.approx(-opt.fun, abs=1e-7)
    assert 0.05 < opt.x < 0.95  # an interior maximum, where the bounded search is exact
    assert fit.lambda_ == pytest.approx(opt.x, abs=1e-4)
    assert fit.k == 4 + 1 + 1
    res = sm.GLS(y, X, sigma=pagel(C, fit.lambda_)).fit()
    assert [r["estimate"] for r in fit.terms] == pytest.approx(res.params, rel=1e-9)


def test_comparison_aicc_weights_and_lr_tests_from_the_formulas():
    """Each model's log-likelihood from statsmodels OLS; AICc, Delta and weights by the
    Burnham & Anderson (2002) formulas written here; LR = 2 (l1 - l0) on chi²(df) from scipy."""
    from scipy.stats import chi2

    t, _ = _table(40, 17)
    t.loc[3, "c"] = np.nan  # one taxon lacks a predictor of one model: left out of every model
    cmp = compare(t, "y", ["a", "a,b", "b,c", "1"], method="ols")
    assert cmp.n == 39 and [e["label"] for e in cmp.excluded] == ["t4"]
    d = pd.DataFrame(
        {"ly": np.log10(t.y), "la": np.log10(t.a), "lb": np.log10(t.b), "lc": np.log10(t.c)}
    ).dropna()
    ll = {
        ("a",): smf.ols("ly ~ la", d).fit().llf,
        ("a", "b"): smf.ols("ly ~ la + lb", d).fit().llf,
        ("b", "c"): smf.ols("ly ~ lb + lc", d).fit().llf,
        (): smf.ols("ly ~ 1", d).fit().llf,
    }
    n = 39
    ks = {m: len(m) + 2 for m in ll}
    aicc = {m: -2 * ll[m] + 2 * ks[m] + 2 * ks[m] * (ks[m] + 1) / (n - ks[m] - 1) for m in ll}
    best = min(aicc.values())
    total = sum(math.exp(-(v - best) / 2) for v in aicc.values())
    order = sorted(aicc, key=aicc.get)
    assert [f.predictors for f in cmp.fits] == order
    for f, dlt, w in zip(cmp.fits, cmp.delta, cmp.weights, strict=True):
        m = f.predictors
        assert f.loglik == pytest.approx(ll[m], rel=1e-12)
        assert f.aicc == pytest.approx(aicc[m], rel=1e-12)
        assert dlt == pytest.approx(aicc[m] - best, abs=1e-9)
        assert w == pytest.approx(math.exp(-(aicc[m] - best) / 2) / total, rel=1e-9)
    assert sum(cmp.weights) == pytest.approx(1.0)
    tests = {(x["smaller"], x["larger"]): x for x in cmp.tests}
    assert set(tests) == {("a", "a + b"), ("1", "a"), ("1", "a + b"), ("1", "b + c")}
    lr = 2 * (ll[("a", "b")] - ll[()])
    assert tests[("1", "a + b")]["statistic"] == pytest.approx(lr, rel=1e-9)
    assert tests[("1", "a + b")]["df"] == 2
    assert tests[("1", "a + b")]["p"] == pytest.approx(chi2.sf(lr, 2), rel=1e-9, abs=1e-300)


def test_joint_wald_f_matches_statsmodels_f_test():
    """The joint test of two coefficients against given values: statsmodels' f_test with the
    same restriction matrix, for OLS and for GLS at a fixed lambda (dense C(lambda))."""
    t, _ = _table(50, 29)
    values = {"a": 0.5, "b": -0.25}
    fit = multiple_fit(t, "y", ["a", "b", "c"], method="ols", against=values)
    X = pd.DataFrame({"const": 1.0, "a": np.log10(t.a), "b": np.log10(t.b), "c": np.log10(t.c)})
    R = np.array([[0, 1, 0, 0], [0, 0, 1, 0]], dtype=float)
    ref = sm.OLS(np.log10(t.y), X).fit().f_test((R, np.array([0.5, -0.25])))
    assert fit.against["statistic"] == pytest.approx(float(np.squeeze(ref.fvalue)), rel=1e-9)
    assert fit.against["df"] == [2, 46] and ref.df_num == 2 and ref.df_denom == 46
    assert fit.against["p"] == pytest.approx(float(ref.pvalue), rel=1e-7)

    nw = random_newick(50, 31, ultrametric=True)
    tg, C = _table(50, 37, nw)
    fit = multiple_fit(
        tg, "y", ["a", "b", "c"], method="pgls", tree=nw, lambda_=0.7, against=values
    )
    Xg = pd.DataFrame({"const": 1.0, "a": np.log10(tg.a), "b": np.log10(tg.b), "c": np.log10(tg.c)})
    ref = (
        sm.GLS(np.log10(tg.y).to_numpy(), Xg, sigma=pagel(C, 0.7))
        .fit()
        .f_test((R, np.array([0.5, -0.25])))
    )
    assert fit.against["statistic"] == pytest.approx(float(np.squeeze(ref.fvalue)), rel=1e-9)
    assert fit.against["p"] == pytest.approx(float(ref.pvalue), rel=1e-7)
    assert fit.against["note"] is None


def test_flags_of_the_multiple_fit_match_statsmodels_influence():
    """Externally studentized residuals, leverages and Cook's distances from statsmodels'
    OLSInfluence on the same design; the flagged set is recomputed here from those values
    with the rules' cut-offs (Bonferroni t(1 - 0.05/2n; n - p - 1), 2p/n, Cook's F(0.5; p, n-p)
    or 4/n: Cook & Weisberg 1982; Hoaglin & Welsch 1978)."""
    from scipy.stats import f as f_dist
    from scipy.stats import t as t_dist
    from statsmodels.stats.outliers_influence import OLSInfluence

    t, _ = _table(40, 41)
    t.loc[2, "y"] *= 30.0  # an outlier in y
    t.loc[5, "a"] *= 1e3  # a point of high leverage
    fit = multiple_fit(t, "y", ["a", "b", "c"], method="ols")
    X = sm.add_constant(np.column_stack([np.log10(t.a), np.log10(t.b), np.log10(t.c)]))
    infl = OLSInfluence(sm.OLS(np.log10(t.y).to_numpy(), X).fit())
    n, p = X.shape
    stud, lev, cook = infl.resid_studentized_external, infl.hat_matrix_diag, infl.cooks_distance[0]
    expect = set()
    for i, lab in enumerate(t.taxon):
        if abs(stud[i]) > t_dist.ppf(1 - 0.05 / (2 * n), n - p - 1):
            expect.add((lab, "studentized", stud[i]))
        if lev[i] > 2 * p / n:
            expect.add((lab, "leverage", lev[i]))
        if cook[i] > min(f_dist.ppf(0.5, p, n - p), 4 / n):
            expect.add((lab, "Cook", cook[i]))
    got = {
        (
            o["label"],
            next(w for w in ("studentized", "leverage", "Cook") if w in o["reason"]),
            o["statistic"],
        )
        for o in fit.outliers
    }
    assert {g[:2] for g in got} == {e[:2] for e in expect}
    assert ("t3", "studentized") in {g[:2] for g in got} and ("t6", "leverage") in {
        g[:2] for g in got
    }
    by_key = {e[:2]: e[2] for e in expect}
    for lab, rule, value in got:
        assert value == pytest.approx(by_key[(lab, rule)], rel=1e-8)


def test_pgls_flags_are_those_of_the_whitened_regression():
    """PGLS flags: statsmodels' OLSInfluence on W y = W X b with W = C(lambda)^(-1/2), the
    symmetric inverse square root of the dense covariance built here from dendropy."""
    from statsmodels.stats.outliers_influence import OLSInfluence

    nw = random_newick(40, 43, ultrametric=True)
    t, C = _table(40, 47, nw)
    t.loc[4, "y"] *= 50.0
    fit = multiple_fit(t, "y", ["a", "b"], method="pgls", tree=nw, lambda_=0.8)
    w, v = np.linalg.eigh(pagel(C, 0.8))
    W = (v / np.sqrt(w)) @ v.T
    X = sm.add_constant(np.column_stack([np.log10(t.a), np.log10(t.b)]))
    infl = OLSInfluence(sm.OLS(W @ np.log10(t.y).to_numpy(), W @ X).fit())
    stud = dict(zip(t.taxon, infl.resid_studentized_external, strict=True))
    bonf = [o for o in fit.outliers if "studentized" in o["reason"]]
    assert t.taxon.iloc[4] in {o["label"] for o in bonf}
    for o in bonf:
        assert o["statistic"] == pytest.approx(stud[o["label"]], rel=1e-8)
    assert fit.flags_note == "flags on the phylogenetically whitened regression"
