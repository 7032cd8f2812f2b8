"""Reference checks of comparo.phylo: published/worked examples and independent routes.

Independent routes: the dense Brownian-motion covariance C is built from
dendropy's own tree reading (taxa on tips) and patristic distances,
C_ij = (d_root,i + d_root,j - d_ij)/2, then statsmodels GLS / OLS / WLS or dense
numpy linear algebra is applied to it. comparo's engine never forms C.
"""

from __future__ import annotations

import math
import time

import dendropy
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.optimize import minimize_scalar

from comparo import phylo

FOUR = "((A:1,B:2):1,(C:1.5,D:0.5):0.5);"
X4 = np.array([0.0, 1.0, 2.0, 3.0])
Y4 = np.array([0.5, 1.9, 2.2, 3.8])


# --------------------------------------------------------------------------- dense reference


def dense_cov(newick: str, labels: list[str] | None = None) -> tuple[list[str], np.ndarray]:
    """BM covariance from dendropy's patristic distances (the independent route)."""
    tree = dendropy.Tree.get(
        data=newick, schema="newick", preserve_underscores=True, rooting="force-rooted"
    )
    if labels is not None:
        tree.retain_taxa_with_labels(labels)
    pdm = tree.phylogenetic_distance_matrix()
    taxa = [nd.taxon for nd in tree.leaf_node_iter()]
    root = tree.seed_node
    depth = {}
    for nd in tree.leaf_node_iter():
        d, cur = 0.0, nd
        while cur is not root:
            d += cur.edge.length
            cur = cur.parent_node
        depth[nd.taxon.label] = d
    names = [t.label for t in taxa] if labels is None else list(labels)
    by = {t.label: t for t in taxa}
    n = len(names)
    C = np.empty((n, n))
    for i, a in enumerate(names):
        for j, b in enumerate(names):
            pd_ab = 0.0 if a == b else pdm.patristic_distance(by[a], by[b])
            C[i, j] = 0.5 * (depth[a] + depth[b] - pd_ab)
    return names, C


def pagel(C: np.ndarray, lam: float) -> np.ndarray:
    return lam * C + (1 - lam) * np.diag(np.diag(C))


def dense_loglik(C, X, y, reml=False):
    """Profile (RE)ML log-likelihood of GLS with V = sigma² C (formulas:
    docs/methods/phylogenetics.md)."""
    n, p = X.shape
    Ci = np.linalg.inv(C)
    XtX = X.T @ Ci @ X
    b = np.linalg.solve(XtX, X.T @ Ci @ y)
    r = y - X @ b
    rss = r @ Ci @ r
    ld = np.linalg.slogdet(C)[1]
    if reml:
        return -0.5 * (
            (n - p) * math.log(2 * math.pi * rss / (n - p))
            + ld
            + np.linalg.slogdet(XtX)[1]
            + (n - p)
        )
    return -0.5 * (n * math.log(2 * math.pi * rss / n) + ld + n)


def simulate(newick: str, seed: int, lam: float = 1.0):
    """x and y evolving by BM on the tree (dense Cholesky of C(lambda)); seeded."""
    names, C = dense_cov(newick)
    rng = np.random.default_rng(seed)
    Lc = np.linalg.cholesky(pagel(C, lam))
    x = Lc @ rng.normal(size=len(names))
    y = 0.3 + 0.8 * x + Lc @ rng.normal(size=len(names))
    return names, C, x, y


# --------------------------------------------------------------------------- worked example


def test_four_tip_worked_example_covariance_and_gls():
    """Four-tip worked example, from memory (computed by hand with dense linear algebra; the
    formulas are in docs/methods/phylogenetics.md), checked here with dendropy + numpy and C
    written out by hand:
    C = [[2,1,0,0],[1,3,0,0],[0,0,2,0.5],[0,0,0.5,1]] (root-to-MRCA lengths), |C| = 8.75."""
    C = np.array([[2, 1, 0, 0], [1, 3, 0, 0], [0, 0, 2, 0.5], [0, 0, 0.5, 1.0]])
    assert np.linalg.det(C) == pytest.approx(8.75, rel=1e-12)
    _, Cd = dense_cov(FOUR, list("ABCD"))
    np.testing.assert_allclose(Cd, C, atol=1e-14)
    ft = phylo.flat_tree(phylo.read_tree(FOUR))
    idx = ft.index(list("ABCD"))
    np.testing.assert_allclose(ft.covariance()[np.ix_(idx, idx)], C)
    Z = np.column_stack([np.ones(4), X4, Y4])
    Zt = np.empty_like(Z)
    Zt[idx] = Z
    gq = phylo.gls_quantities(ft, Zt)
    assert gq.logdet == pytest.approx(2.169054, abs=1e-6)
    assert gq.logdet == pytest.approx(math.log(8.75), rel=1e-12)
    np.testing.assert_allclose(
        gq.W[:2, :2], [[1.742857, 3.342857], [3.342857, 9.542857]], atol=1e-6
    )
    np.testing.assert_allclose(gq.W[:2, 2], [4.465714, 12.145714], atol=1e-6)
    assert gq.W[2, 2] == pytest.approx(15.705429, abs=1e-6)
    Ci = np.linalg.inv(C)
    np.testing.assert_allclose(gq.W, Z.T @ Ci @ Z, rtol=1e-12)


def test_four_tip_worked_example_pgls():
    """Four-tip worked example, from memory: beta = (0.369110, 1.143455), l_ML -0.432041, l_REML
    -2.299894, se(slope) 0.164279, 95% CI (0.436618, 1.850293) with t(2)."""
    df = pd.DataFrame({"taxon": list("ABCD"), "x": X4, "y": Y4})
    r = phylo.pgls(df, "x", "y", tree=FOUR, log="none", lambda_=1.0)
    assert r["intercept"] == pytest.approx(0.369110, abs=1e-6)
    assert r["slope"] == pytest.approx(1.143455, abs=1e-6)
    assert r["loglik"] == pytest.approx(-0.432041, abs=1e-6)
    assert r["slope_se"] == pytest.approx(0.164279, abs=1e-6)
    assert r["slope_ci"] == pytest.approx([0.436618, 1.850293], abs=1e-6)
    assert r["sigma2"] == pytest.approx(0.084503, abs=1e-6)
    rr = phylo.pgls(df, "x", "y", tree=FOUR, log="none", lambda_=1.0, reml=True)
    assert rr["loglik"] == pytest.approx(-2.299894, abs=1e-6)
    assert rr["likelihood"] == "REML"


def test_four_tip_worked_example_lambda_tree():
    """Four-tip worked example, from memory: the lambda = 0.5 tree is
    ((A:1.5,B:2.5):0.5,(C:1.75,D:0.75):0.25); l_ML = -0.225777, -0.362228, -0.432041 at lambda 0,
    0.5, 1; the ML lambda is 0."""
    ft = phylo.flat_tree(phylo.read_tree(FOUR))
    half = phylo.flat_tree(phylo.read_tree("((A:1.5,B:2.5):0.5,(C:1.75,D:0.75):0.25);"))
    np.testing.assert_allclose(
        half.covariance(), ft.covariance() * 0.5 + 0.5 * np.diag(np.diag(ft.covariance()))
    )
    np.testing.assert_allclose(np.sort(phylo.pagel_edges(ft, 0.5)), np.sort(half.length))
    df = pd.DataFrame({"taxon": list("ABCD"), "x": X4, "y": Y4})
    for lam, want in [(0.0, -0.225777), (0.5, -0.362228), (1.0, -0.432041)]:
        assert phylo.pgls(df, "x", "y", tree=FOUR, log="none", lambda_=lam)[
            "loglik"
        ] == pytest.approx(want, abs=1e-6)
    r = phylo.pgls(df, "x", "y", tree=FOUR, log="none", lambda_="ml")
    assert r["lambda"] == pytest.approx(0.0, abs=1e-4)
    assert r["lambda_tests"]["lambda_1"]["statistic"] == pytest.approx(
        2 * (-0.225777 + 0.432041), abs=1e-5
    )


def test_four_tip_worked_example_contrasts_and_k():
    """Four-tip worked example, from memory: contrasts (first child - second) x -0.577350,
    -0.707107, -1.515854; y -0.808290, -1.131371, -1.526308; slope through the origin 1.143455 = GLS
    slope; root y 2.562295 = GLS mean; K(y) 0.783913, K(x) 0.957122."""
    tree = phylo.read_tree(FOUR)
    cx = phylo.contrasts(tree, dict(zip("ABCD", X4, strict=True)))
    cy = phylo.contrasts(tree, dict(zip("ABCD", Y4, strict=True)))
    np.testing.assert_allclose(cx.contrasts, [-0.577350, -0.707107, -1.515854], atol=1e-6)
    np.testing.assert_allclose(cy.contrasts, [-0.808290, -1.131371, -1.526308], atol=1e-6)
    assert (cx.contrasts @ cy.contrasts) / (cx.contrasts @ cx.contrasts) == pytest.approx(
        1.143455, abs=1e-6
    )
    assert cy.root_value == pytest.approx(2.562295, abs=1e-6)
    C = np.array([[2, 1, 0, 0], [1, 3, 0, 0], [0, 0, 2, 0.5], [0, 0, 0.5, 1.0]])
    one = np.ones(4)
    Ci = np.linalg.inv(C)
    assert cy.root_value == pytest.approx((one @ Ci @ Y4) / (one @ Ci @ one), rel=1e-12)
    ft = phylo.flat_tree(tree)
    idx = ft.index(list("ABCD"))
    Yt = np.empty((4, 2))
    Yt[idx] = np.column_stack([Y4, X4])
    np.testing.assert_allclose(phylo.blomberg_k(ft, Yt), [0.783913, 0.957122], atol=1e-6)
    s = phylo.tree_signal(tree, dict(zip("ABCD", Y4, strict=True)), permutations=0)
    assert s.K == pytest.approx(0.783913, abs=1e-6)


def test_four_tip_worked_example_measurement_error():
    """Four-tip worked example, from memory (Ives, Midford & Garland 2007, Syst Biol 56:252-270
    model): se² = (0.1, 0.2, 0, 0.3), sigma² = 1: ln|V| 2.598384, beta = (0.375853, 1.128912)."""
    ft = phylo.flat_tree(phylo.read_tree(FOUR))
    idx = ft.index(list("ABCD"))
    Z = np.empty((4, 3))
    Z[idx] = np.column_stack([np.ones(4), X4, Y4])
    e = ft.length.copy()
    se2 = np.empty(4)
    se2[idx] = [0.1, 0.2, 0.0, 0.3]
    e[:4] += se2
    gq = phylo.gls_quantities(ft, Z, e)
    assert gq.logdet == pytest.approx(2.598384, abs=1e-6)
    np.testing.assert_allclose(
        np.linalg.solve(gq.W[:2, :2], gq.W[:2, 2]), [0.375853, 1.128912], atol=1e-6
    )


# ---------------------------------------------------------------------- random trees vs statsmodels


CASES = [
    (5, 11, False, 0.0),
    (17, 12, True, 0.0),
    (40, 13, False, 0.3),
    (120, 14, True, 0.2),
    (300, 15, False, 0.15),
]


@pytest.mark.parametrize("n,seed,ultra,poly", CASES)
def test_pgls_matches_statsmodels_gls(n, seed, ultra, poly):
    """Independent route: statsmodels GLS (params, bse, llf) with the dense covariance from
    dendropy patristic distances, at lambda 0, 0.5 and 1; random trees (seeded) with and
    without polytomies, ultrametric and not. Tolerance 1e-8 relative (floating point only)."""
    nw = phylo.random_newick(n, seed, ultrametric=ultra, polytomy=poly)
    names, C, x, y = simulate(nw, seed + 100)
    df = pd.DataFrame({"taxon": names, "x": x, "y": y})
    X = sm.add_constant(x)
    for lam in (0.0, 0.5, 1.0):
        ref = sm.GLS(y, X, sigma=pagel(C, lam)).fit()
        r = phylo.pgls(df, "x", "y", tree=nw, log="none", lambda_=lam)
        np.testing.assert_allclose([r["intercept"], r["slope"]], ref.params, rtol=1e-8)
        np.testing.assert_allclose([r["intercept_se"], r["slope_se"]], ref.bse, rtol=1e-8)
        assert r["loglik"] == pytest.approx(ref.llf, rel=1e-8)
        lo, hi = ref.conf_int(0.05)[1]
        assert r["slope_ci"] == pytest.approx([lo, hi], rel=1e-8)
        rr = phylo.pgls(df, "x", "y", tree=nw, log="none", lambda_=lam, reml=True)
        assert rr["loglik"] == pytest.approx(dense_loglik(pagel(C, lam), X, y, reml=True), rel=1e-8)


def test_polytomy_tree_counted_correctly():
    """A polytomy check by hand: ((A:1,B:1,C:1):1,D:2); has C =
    [[2,1,1,0],[1,2,1,0],[1,1,2,0],[0,0,0,2]] (root-to-MRCA lengths); ln|C| = ln(det) by numpy."""
    C = np.array([[2, 1, 1, 0], [1, 2, 1, 0], [1, 1, 2, 0], [0, 0, 0, 2.0]])
    ft = phylo.flat_tree(phylo.read_tree("((A:1,B:1,C:1):1,D:2);"))
    idx = ft.index(list("ABCD"))
    assert phylo.gls_quantities(ft, np.ones((4, 1))).logdet == pytest.approx(
        np.linalg.slogdet(C)[1], rel=1e-12
    )
    np.testing.assert_allclose(ft.covariance()[np.ix_(idx, idx)], C)


def test_pruning_matches_dendropy_pruned_tree():
    """Independent route: dendropy's retain_taxa_with_labels prunes the tree; the dense GLS on
    its covariance equals comparo's fit on the table subset (unary nodes merged)."""
    nw = phylo.random_newick(60, 21, ultrametric=False, polytomy=0.2)
    names, C, x, y = simulate(nw, 22)
    keep = names[::3]
    sub = [names.index(k) for k in keep]
    df = pd.DataFrame({"taxon": keep, "x": x[sub], "y": y[sub]})
    _, Ck = dense_cov(nw, keep)
    for lam in (0.3, 1.0):
        ref = sm.GLS(y[sub], sm.add_constant(x[sub]), sigma=pagel(Ck, lam)).fit()
        r = phylo.pgls(df, "x", "y", tree=nw, log="none", lambda_=lam)
        np.testing.assert_allclose([r["intercept"], r["slope"]], ref.params, rtol=1e-8)
        assert r["loglik"] == pytest.approx(ref.llf, rel=1e-8)
        assert len(r["tips_pruned"]) == 60 - len(keep)


def test_lambda_ml_matches_dense_grid():
    """Lambda by ML vs a fine grid (step 1e-4) of the dense statsmodels GLS log-likelihood:
    maximisers agree within 1e-3 (issue requirement); y simulated with lambda 0.6 (seed 31)."""
    nw = phylo.random_newick(80, 30, ultrametric=True)
    names, C, x, y = simulate(nw, 31, lam=0.6)
    df = pd.DataFrame({"taxon": names, "x": x, "y": y})
    X = sm.add_constant(x)
    grid = np.linspace(0, 1, 10001)
    for reml in (False, True):
        ll = [dense_loglik(pagel(C, g), X, y, reml=reml) for g in grid[::10]]
        i = int(np.argmax(ll)) * 10
        fine = grid[max(0, i - 10) : i + 11]
        llf = [dense_loglik(pagel(C, g), X, y, reml=reml) for g in fine]
        lam_grid = fine[int(np.argmax(llf))]
        r = phylo.pgls(df, "x", "y", tree=nw, log="none", lambda_="ml", reml=reml)
        assert abs(r["lambda"] - lam_grid) < 1e-3
        assert r["loglik"] == pytest.approx(max(llf), abs=1e-6)
        # profile CI ends satisfy 2(lmax - l) = chi2_1(0.95) = 3.8415 or sit on a bound
        for end in r["lambda_ci"]:
            if 0.0 < end < 1.0:
                assert 2 * (
                    r["loglik"] - dense_loglik(pagel(C, end), X, y, reml=reml)
                ) == pytest.approx(3.841459, abs=1e-4)


def test_star_tree_and_lambda_zero_give_ols():
    """A star tree with equal tip edges has C = t·I, so PGLS = OLS (statsmodels OLS);
    lambda = 0 on an ultrametric tree gives OLS too; lambda = 0 on a non-ultrametric tree
    gives WLS with weights 1/C_ii (statsmodels WLS)."""
    rng = np.random.default_rng(41)
    n = 25
    names = [f"s{i}" for i in range(n)]
    x = rng.normal(size=n)
    y = 1 + 0.5 * x + rng.normal(scale=0.3, size=n)
    df = pd.DataFrame({"taxon": names, "x": x, "y": y})
    star = "(" + ",".join(f"{s}:2.5" for s in names) + ");"
    ols = sm.OLS(y, sm.add_constant(x)).fit()
    r = phylo.pgls(df, "x", "y", tree=star, log="none", lambda_=1.0)
    np.testing.assert_allclose([r["intercept"], r["slope"]], ols.params, rtol=1e-10)
    np.testing.assert_allclose([r["intercept_se"], r["slope_se"]], ols.bse, rtol=1e-10)
    assert r["loglik"] == pytest.approx(ols.llf, rel=1e-10)
    assert r["r2"] == pytest.approx(ols.rsquared, rel=1e-10)
    nw = phylo.random_newick(30, 42, ultrametric=True)
    tn, C, x2, y2 = simulate(nw, 43)
    d2 = pd.DataFrame({"taxon": tn, "x": x2, "y": y2})
    ols2 = sm.OLS(y2, sm.add_constant(x2)).fit()
    r0 = phylo.pgls(d2, "x", "y", tree=nw, log="none", lambda_=0.0)
    np.testing.assert_allclose([r0["intercept"], r0["slope"]], ols2.params, rtol=1e-8)
    np.testing.assert_allclose([r0["intercept_se"], r0["slope_se"]], ols2.bse, rtol=1e-8)
    nw3 = phylo.random_newick(30, 44, ultrametric=False)
    tn3, C3, x3, y3 = simulate(nw3, 45)
    wls = sm.WLS(y3, sm.add_constant(x3), weights=1 / np.diag(C3)).fit()
    r3 = phylo.pgls(
        pd.DataFrame({"taxon": tn3, "x": x3, "y": y3}), "x", "y", tree=nw3, log="none", lambda_=0.0
    )
    np.testing.assert_allclose([r3["intercept"], r3["slope"]], wls.params, rtol=1e-8)


def test_engine_matches_dense_numpy_with_measurement_error():
    """Independent route: dense numpy ln|V|, X'V⁻¹X, X'V⁻¹y, y'V⁻¹y for V = s2·C(lambda) + diag(se²)
    (Ives, Midford & Garland 2007) on a polytomous non-ultrametric tree; 1e-10 relative."""
    nw = phylo.random_newick(90, 51, ultrametric=False, polytomy=0.25)
    names, C, x, y = simulate(nw, 52)
    rng = np.random.default_rng(53)
    se2 = rng.uniform(0, 0.5, size=len(names))
    ft = phylo.flat_tree(phylo.read_tree(nw), names)
    idx = ft.index(names)
    Z = np.column_stack([np.ones(len(names)), x, y])
    Zt = np.empty_like(Z)
    Zt[idx] = Z
    for lam, s2 in [(1.0, 0.7), (0.4, 2.0), (0.0, 1.3)]:
        e = s2 * phylo.pagel_edges(ft, lam)
        st = np.empty_like(se2)
        st[idx] = se2
        e[: ft.n_tips] += st
        gq = phylo.gls_quantities(ft, Zt, e)
        V = s2 * pagel(C, lam) + np.diag(se2)
        assert gq.logdet == pytest.approx(np.linalg.slogdet(V)[1], rel=1e-10)
        np.testing.assert_allclose(gq.W, Z.T @ np.linalg.solve(V, Z), rtol=1e-10)


def test_pgls_measurement_error_fit_matches_dense_ml():
    """With measurement error sigma² is estimated by maximising the dense numpy likelihood
    (scipy bounded search on ln sigma²); comparo's beta and log-likelihood agree (1e-6)."""
    nw = phylo.random_newick(50, 61, ultrametric=True)
    names, C, x, y = simulate(nw, 62)
    rng = np.random.default_rng(63)
    u = rng.uniform(0.05, 0.6, size=len(names))
    df = pd.DataFrame({"taxon": names, "x": x, "y": y, "y_u": u})
    X = sm.add_constant(x)
    lam = 0.8

    def dense(ls2):
        V = math.exp(ls2) * pagel(C, lam) + np.diag(u**2)
        Vi = np.linalg.inv(V)
        b = np.linalg.solve(X.T @ Vi @ X, X.T @ Vi @ y)
        r = y - X @ b
        return -0.5 * (len(y) * math.log(2 * math.pi) + np.linalg.slogdet(V)[1] + r @ Vi @ r), b

    opt = minimize_scalar(
        lambda v: -dense(v)[0], bounds=(-12, 4), method="bounded", options={"xatol": 1e-10}
    )
    ll_ref, b_ref = dense(opt.x)
    r = phylo.pgls(df, "x", "y", tree=nw, log="none", lambda_=lam, tip_se="y_u")
    assert r["loglik"] == pytest.approx(ll_ref, abs=1e-6)
    np.testing.assert_allclose([r["intercept"], r["slope"]], b_ref, rtol=1e-5)
    assert r["sigma2"] == pytest.approx(math.exp(opt.x), rel=1e-3)


def test_groups_interaction_f_matches_statsmodels():
    """Slope-difference test: the extra-sum-of-squares F between statsmodels GLS fits with and
    without group-by-x interaction at the same lambda (compare_f_test) equals comparo's."""
    nw = phylo.random_newick(60, 71, ultrametric=True)
    names, C, x, y = simulate(nw, 72)
    g = np.array(["a", "b", "c"])[np.arange(len(names)) % 3]
    y = y + np.where(g == "b", 0.8 * x, 0.0)
    df = pd.DataFrame({"taxon": names, "x": x, "y": y, "clade": g})
    r = phylo.pgls(df, "x", "y", tree=nw, log="none", lambda_=0.7, by="clade")
    D = np.column_stack([(g == k).astype(float) for k in "abc"])
    S = pagel(C, 0.7)
    full = sm.GLS(y, np.column_stack([D, D * x[:, None]]), sigma=S).fit()
    add = sm.GLS(y, np.column_stack([D, x]), sigma=S).fit()
    F, p, dfd = full.compare_f_test(add)
    t = r["group_tests"]["common_slope"]
    assert t["statistic"] == pytest.approx(F, rel=1e-8)
    assert t["p"] == pytest.approx(p, rel=1e-6)
    np.testing.assert_allclose([row["slope"] for row in r["groups"]], full.params[3:], rtol=1e-8)
    assert t["slope"] == pytest.approx(add.params[3], rel=1e-8)
    assert t["slope_ci"] == pytest.approx(list(add.conf_int(0.05)[3]), rel=1e-8)
    pooled = sm.GLS(y, sm.add_constant(x), sigma=S).fit()
    Fe, pe, _ = add.compare_f_test(pooled)
    assert r["group_tests"]["elevation"]["statistic"] == pytest.approx(Fe, rel=1e-8)


# --------------------------------------------------------------------------- contrasts and K


@pytest.mark.parametrize("seed,poly,ultra", [(81, 0.0, True), (82, 0.3, False)])
def test_contrast_slope_equals_gls_slope(seed, poly, ultra):
    """The regression through the origin of standardised y-contrasts on x-contrasts equals the
    BM-GLS slope (Garland & Ives 2000, Am Nat 155:346-364; Blomberg et al. 2012, Syst Biol
    61:382-391), and the PIC root value equals the GLS mean (statsmodels GLS), polytomies
    included."""
    nw = phylo.random_newick(70, seed, ultrametric=ultra, polytomy=poly)
    names, C, x, y = simulate(nw, seed + 1)
    cx = phylo.contrasts(nw, dict(zip(names, x, strict=True)))
    cy = phylo.contrasts(nw, dict(zip(names, y, strict=True)))
    assert cx.contrasts.size == len(names) - 1
    ref = sm.GLS(y, sm.add_constant(x), sigma=C).fit()
    assert (cx.contrasts @ cy.contrasts) / (cx.contrasts @ cx.contrasts) == pytest.approx(
        ref.params[1], rel=1e-9
    )
    mean = sm.GLS(y, np.ones(len(y)), sigma=C).fit().params[0]
    assert cy.root_value == pytest.approx(mean, rel=1e-9)
    # sum of squared contrasts = generalised RSS about the GLS mean (same identity)
    Ci = np.linalg.inv(C)
    r0 = y - mean
    assert cy.contrasts @ cy.contrasts == pytest.approx(r0 @ Ci @ r0, rel=1e-9)


def test_blomberg_k_matches_dense_formula_and_permutations():
    """Blomberg, Garland & Ives 2003 (Evolution 57:717-745) K by its dense formula (numpy) on
    the observed and on the same seeded permutations (numpy default_rng(5)); p-value counted
    the same way, (1 + #{K_perm >= K})/(m + 1)."""
    nw = phylo.random_newick(40, 91, ultrametric=False, polytomy=0.1)
    names, C, x, y = simulate(nw, 92)

    def kdense(v):
        one = np.ones(len(v))
        Ci = np.linalg.inv(C)
        a = one @ Ci @ v / (one @ Ci @ one)
        r = v - a
        return (r @ r / (r @ Ci @ r)) / ((np.trace(C) - len(v) / (one @ Ci @ one)) / (len(v) - 1))

    s = phylo.tree_signal(nw, dict(zip(names, y, strict=True)), permutations=200, seed=5)
    assert s.K == pytest.approx(kdense(y), rel=1e-10)
    ft = phylo.flat_tree(phylo.read_tree(nw), names)
    yt = np.empty_like(y)
    yt[ft.index(names)] = y
    perm = np.random.default_rng(5).permuted(np.tile(yt, (200, 1)), axis=1)
    # permuted vectors are in the tree's tip order; map back to `names` order for the dense K
    back = ft.index(names)
    kp = np.array([kdense(p[back]) for p in perm])
    assert s.K_p == pytest.approx((1 + np.sum(kp >= kdense(y) * (1 - 1e-12))) / 201)


# --------------------------------------------------------------------------- deep trees


def test_ladder_tree_depth_50000_bounded_time():
    """A ladder (caterpillar) tree 50,000 deep parses (dendropy, on a big stack) and fits in
    bounded time; the PGLS slope equals the contrast slope (Garland & Ives 2000 identity),
    an independent algorithm on the same tree. Seeded data (default_rng(7))."""
    n = 50_000
    nw = "".join(f"(t{i}:1," for i in range(n - 1)) + f"t{n - 1}:1" + "):1" * (n - 2) + ");"
    start = time.perf_counter()
    tree = phylo.read_tree(nw)
    rng = np.random.default_rng(7)
    names = [f"t{i}" for i in range(n)]
    x = rng.normal(size=n)
    y = 0.5 * x + rng.normal(size=n)
    r = phylo.pgls(
        pd.DataFrame({"taxon": names, "x": x, "y": y}), "x", "y", tree=tree, log="none", lambda_=1.0
    )
    cx = phylo.contrasts(tree, dict(zip(names, x, strict=True)))
    cy = phylo.contrasts(tree, dict(zip(names, y, strict=True)))
    elapsed = time.perf_counter() - start
    assert r["n"] == n
    assert r["slope"] == pytest.approx(
        (cx.contrasts @ cy.contrasts) / (cx.contrasts @ cx.contrasts), rel=1e-8
    )
    assert elapsed < 60


def test_lambda_ml_with_measurement_error_matches_dense_profile():
    """Lambda by ML with measurement error (Ives et al. 2007 model) vs a dense numpy profile:
    for each lambda on a 0.005 grid, sigma² maximises the dense likelihood (scipy bounded
    search). comparo's maximum is at least the grid maximum (less 1e-6) and its lambda lies
    within one grid step of the grid maximiser. y simulated with lambda 0.5 (seed 102)."""
    nw = phylo.random_newick(40, 101, ultrametric=False, polytomy=0.2)
    names, C, x, y = simulate(nw, 102, lam=0.5)
    u = np.random.default_rng(103).uniform(0.05, 0.4, size=len(names))
    df = pd.DataFrame({"taxon": names, "x": x, "y": y, "y_u": u})
    X = sm.add_constant(x)

    def prof(lam):
        def nll(ls2):
            V = math.exp(ls2) * pagel(C, lam) + np.diag(u**2)
            Vi = np.linalg.inv(V)
            b = np.linalg.solve(X.T @ Vi @ X, X.T @ Vi @ y)
            r = y - X @ b
            return 0.5 * (len(y) * math.log(2 * math.pi) + np.linalg.slogdet(V)[1] + r @ Vi @ r)

        return -minimize_scalar(nll, bounds=(-15, 5), method="bounded", options={"xatol": 1e-9}).fun

    grid = np.linspace(0, 1, 201)
    ll = np.array([prof(g) for g in grid])
    r = phylo.pgls(df, "x", "y", tree=nw, log="none", lambda_="ml", tip_se="y_u")
    assert r["loglik"] >= ll.max() - 1e-6
    assert abs(r["lambda"] - grid[int(np.argmax(ll))]) <= 0.005 + 1e-9
    assert r["loglik"] == pytest.approx(prof(r["lambda"]), abs=1e-6)
