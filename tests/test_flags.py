"""Behaviour of comparo.fitting.flags: planted outliers, rule bookkeeping, robust and LTS
evidence."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from comparo.fitting import fit
from comparo.fitting.flags import OUTLIER_RULES, bonferroni_cut, flag_points


def _planted(seed: int, n: int = 100):
    rng = np.random.default_rng(seed)
    x = rng.normal(0, 1, n)
    y = 0.5 + 0.75 * x + rng.normal(0, 0.1, n)
    planted = [3, 40, 77]
    y[planted] += np.array([1.2, -1.0, 1.5])
    return x, y, [f"p{i}" for i in range(n)], planted


def test_planted_outliers_are_flagged_and_few_clean_points_are():
    """Common practice check: 20 seeded data sets (default_rng(100 + k)) of 100 points with 3
    planted vertical outliers (10-15 residual sd): every planted point is flagged by the Bonferroni
    rule, and at most 5% of the clean points across all sets are flagged as outliers."""
    clean_flagged = clean_total = 0
    for k in range(20):
        x, y, labels, planted = _planted(100 + k)
        rep = flag_points(x, y, labels)
        out = set(rep.labels(("bonferroni",)))
        assert {labels[i] for i in planted} <= out
        clean_flagged += len(out - {labels[i] for i in planted})
        clean_total += len(labels) - len(planted)
    assert clean_flagged / clean_total <= 0.05


def test_flags_never_remove_points():
    x, y, labels, planted = _planted(1)
    t = pd.DataFrame({"taxon": labels, "m": 10**x, "f": 10**y})
    r = fit(t, "m", "f", "ols")
    assert r.n == 100 and r.excluded == []
    assert {"p3", "p40", "p77"} <= {o["label"] for o in r.outliers}
    assert all(set(o) == {"label", "reason", "statistic"} for o in r.outliers)


def test_bonferroni_cut_grows_with_n():
    assert bonferroni_cut(20) < bonferroni_cut(200) < bonferroni_cut(2000)
    assert bonferroni_cut(28, alpha=0.10) < bonferroni_cut(28, alpha=0.05)


def test_cooks_rule_reports_the_strongest_cut_once():
    x = np.r_[np.linspace(0, 1, 15), 5.0]
    y = np.r_[np.linspace(0, 1, 15) + 0.01 * np.sin(np.arange(15)), -3.0]
    rep = flag_points(x, y, [f"s{i}" for i in range(16)])
    cook = [f for f in rep.flags if f.rule == "cooks_d" and f.label == "s15"]
    assert len(cook) == 1 and "F(0.5" in cook[0].reason and cook[0].statistic > rep.cuts["cooks_f"]


def test_weight_and_lts_rules():
    x = np.arange(10.0)
    y = x.copy()
    w = np.ones(10)
    w[2] = 0.3
    std = np.zeros(10)
    std[5] = -4.0
    rep = flag_points(x, y + 0.01 * np.cos(x), [str(i) for i in range(10)], weights=w, lts_std=std)
    assert rep.labels(("robust_weight",)) == ["2"]
    assert rep.labels(("lts_residual",)) == ["5"]
    assert set(rep.labels(OUTLIER_RULES)) == {"2", "5"}
    tab = rep.to_frame()
    assert {"label", "leverage", "studentized", "cooks_d", "weight", "lts_std"} <= set(tab.columns)
    assert "flag(s)" in rep.summary()
    assert rep.to_dict()["cuts"]["leverage"] == pytest.approx(0.4)


# --------------------------------------------------------------------------- --drop-flagged


def test_drop_flagged_drops_planted_and_refit_is_closer_to_true_slope():
    """Planted vertical outliers (as above; invented data, seed 5, true slope 0.75): the refit
    without the points breaking a misfit rule drops exactly the planted points, lists each with its
    rule, moves the OLS slope toward 0.75 and leaves the original fit untouched."""
    rng = np.random.default_rng(5)
    n = 60
    x = rng.normal(0, 1, n)
    y = 0.5 + 0.75 * x + rng.normal(0, 0.1, n)
    planted = [2, 30, 51]
    x[planted] = [1.0, 1.6, 2.2]  # at high x, so they pull the slope down
    y[planted] = 0.5 + 0.75 * x[planted] - np.array([1.6, 1.8, 2.0])
    labels = [f"p{i}" for i in range(n)]
    t = pd.DataFrame({"taxon": labels, "m": 10**x, "f": 10**y})
    plain = fit(t, "m", "f", "ols")
    r = fit(t, "m", "f", "ols", drop_flagged=True)
    rf = r.refit_without_flagged
    assert [d["label"] for d in rf.dropped] == [labels[i] for i in planted]
    assert all(d["rules"] == ["bonferroni"] for d in rf.dropped)
    assert rf.fit.n == n - 3 and abs(rf.fit.slope - 0.75) < abs(r.slope - 0.75)
    assert rf.slope_change == pytest.approx(rf.fit.slope - r.slope)
    assert r.slope == plain.slope and r.n == plain.n == n  # the original is reported as it was
    d = r.to_dict()
    assert {"label", "rules", "reasons"} <= set(d["refit_without_flagged"]["dropped"][0])
    assert d["refit_without_flagged"]["fit"]["n"] == n - 3
    assert {k: v for k, v in d.items() if k != "refit_without_flagged"} == plain.to_dict()
    text = r.summary()
    assert "refit without flagged points" in text and all(
        f"dropped {labels[i]}" in text for i in planted
    )
    frame = r.to_frame()
    assert set(frame.loc[frame["group"] == "(dropped)", "term"]) == {labels[i] for i in planted}
    assert (
        frame.loc[
            (frame["group"] == "(without flagged)") & (frame["term"] == "slope"), "estimate"
        ].item()
        == rf.fit.slope
    )


def test_nothing_dropped_without_the_option():
    x, y, labels, planted = _planted(2)
    t = pd.DataFrame({"taxon": labels, "m": 10**x, "f": 10**y})
    r = fit(t, "m", "f", "ols")
    assert r.refit_without_flagged is None and "refit_without_flagged" not in r.to_dict()
    assert r.n == len(labels) and {labels[i] for i in planted} <= {o["label"] for o in r.outliers}


def test_drop_rule_selection_and_clean_case():
    from comparo.base.errors import UsageError
    from comparo.fitting.flags import ALL_RULES, DEFAULT_DROP_RULES, drop_rules

    assert drop_rules(True) == drop_rules("default") == DEFAULT_DROP_RULES == OUTLIER_RULES
    assert drop_rules("outlier,cook") == ("bonferroni", "cooks_d", "robust_weight", "lts_residual")
    assert drop_rules("all") == ALL_RULES and drop_rules(None) == drop_rules(False) == ()
    with pytest.raises(UsageError, match="unknown rule 'bogus'"):
        drop_rules("bogus")
    x, y, labels, planted = _planted(3)
    t = pd.DataFrame({"taxon": labels, "m": 10**x, "f": 10**y})
    lev = fit(t, "m", "f", "ols", drop_flagged="leverage").refit_without_flagged
    flagged = {o["label"] for o in fit(t, "m", "f", "ols").outliers if "leverage" in o["reason"]}
    assert {d["label"] for d in lev.dropped} == flagged and all(
        d["rules"] == ["leverage"] for d in lev.dropped
    )
    rng = np.random.default_rng(4)
    xc = rng.uniform(0, 2, 40)
    clean = pd.DataFrame(
        {
            "taxon": [f"c{i}" for i in range(40)],
            "m": 10**xc,
            "f": 10 ** (0.3 * xc + rng.normal(0, 0.05, 40)),
        }
    )
    rc = fit(clean, "m", "f", "sma", drop_flagged="bonferroni").refit_without_flagged
    assert rc.dropped == () and rc.fit is None and "nothing was dropped" in rc.note


def test_drop_flagged_lts_exposes_and_drops_a_masked_cluster():
    """A cluster of 5 bad leverage points (invented, seed 8) masks itself under OLS diagnostics; the
    LTS residual rule flags it (Rousseeuw & Leroy 1987 describe this masking) and the LTS refit
    without it keeps the slope of the clean points."""
    rng = np.random.default_rng(8)
    x = np.r_[rng.uniform(0, 2, 35), rng.normal(4, 0.05, 5)]
    y = np.r_[1 + 0.5 * x[:35] + rng.normal(0, 0.05, 35), rng.normal(0.5, 0.05, 5)]
    t = pd.DataFrame({"taxon": [f"q{i}" for i in range(40)], "m": 10**x, "f": 10**y})
    r = fit(t, "m", "f", "lts", drop_flagged="lts_residual")
    dropped = {d["label"] for d in r.refit_without_flagged.dropped}
    cluster = {f"q{i}" for i in range(35, 40)}
    assert (
        cluster <= dropped and len(dropped - cluster) <= 2
    )  # |z| > 2.5 hits ~1% of clean normal points
    assert r.refit_without_flagged.fit.slope == pytest.approx(0.5, abs=0.05)
    ols = fit(t, "m", "f", "ols", drop_flagged="bonferroni").refit_without_flagged
    assert not {d["label"] for d in ols.dropped} & {
        f"q{i}" for i in range(35, 40)
    }  # masked under OLS


def test_closed_form_influence_matches_statsmodels():
    """The closed-form leverages, externally studentized residuals and Cook's distances equal
    statsmodels' OLSInfluence (an independent library that refits without each point)."""
    from statsmodels.api import OLS, add_constant
    from statsmodels.stats.outliers_influence import OLSInfluence

    from comparo.fitting.flags import influence

    x, y, _, _ = _planted(9)
    ref = OLSInfluence(OLS(y, add_constant(x)).fit())
    t_ext, lev, cooks = influence(x, y)
    assert t_ext == pytest.approx(np.asarray(ref.resid_studentized_external), rel=1e-9)
    assert lev == pytest.approx(np.asarray(ref.hat_matrix_diag), rel=1e-9)
    assert cooks == pytest.approx(np.asarray(ref.cooks_distance[0]), rel=1e-9)


# ------------------------------------------------------------------------- PGLS: whitened residuals


def test_whitened_flags_equal_an_independent_gls_route():
    """Flags of a PGLS fit use the regression whitened by C(lambda)^(-1/2). Independent route: the
    BM covariance of a hand-drawn 7-tip tree written out by hand (C_ij = root-to-MRCA distance,
    Grafen 1989), Pagel's transform lambda C + (1 - lambda) diag(C) (Pagel 1999), scipy.linalg.sqrtm
    for the inverse root, and statsmodels' OLSInfluence on the whitened data (leverage, external
    studentized residual, Cook's distance); the whitened least squares slope equals comparo's PGLS
    slope at the same fixed lambda (Aitken's theorem: GLS = OLS on whitened data)."""
    from scipy.linalg import sqrtm
    from statsmodels.regression.linear_model import OLS
    from statsmodels.stats.outliers_influence import OLSInfluence

    from comparo.fitting.flags import fit_flags

    newick = "(((a:1,b:1):1,c:2):1.5,((d:0.5,e:0.5):2,(f:1.2,g:1.2):1.3):1);"
    tips = list("abcdefg")
    # root-to-MRCA distances read off the tree by hand
    C = np.array(
        [
            [3.5, 2.5, 1.5, 0, 0, 0, 0],
            [2.5, 3.5, 1.5, 0, 0, 0, 0],
            [1.5, 1.5, 3.5, 0, 0, 0, 0],
            [0, 0, 0, 3.5, 3.0, 1.0, 1.0],
            [0, 0, 0, 3.0, 3.5, 1.0, 1.0],
            [0, 0, 0, 1.0, 1.0, 3.5, 2.3],
            [0, 0, 0, 1.0, 1.0, 2.3, 3.5],
        ]
    )
    lam = 0.7
    Cl = lam * C + (1 - lam) * np.diag(np.diag(C))
    rng = np.random.default_rng(11)
    x = rng.uniform(0, 3, 7)
    y = 0.4 + 0.8 * x + rng.normal(0, 0.3, 7)
    y[2] += 1.5
    t = pd.DataFrame(
        {"taxon": tips[::-1], "m": 10 ** x[::-1], "f": 10 ** y[::-1]}
    )  # rows not in tip order
    res = fit(t, "m", "f", "pgls", tree=newick, lambda_=lam)
    pts = pd.DataFrame({"label": t["taxon"], "x_fit": np.log10(t["m"]), "y_fit": np.log10(t["f"])})
    rep = fit_flags(res, pts, tree=newick)
    assert rep.residuals == "whitened"
    W = np.real(np.linalg.inv(sqrtm(Cl)))
    Z = np.column_stack([np.ones(7), x])
    ols = OLS(W @ y, W @ Z).fit()
    assert ols.params[1] == pytest.approx(res.slope, rel=1e-9)
    inf = OLSInfluence(ols)
    got = {r["label"]: r for r in rep.table}
    for i, lab in enumerate(tips):
        assert got[lab]["leverage"] == pytest.approx(inf.hat_matrix_diag[i], rel=1e-8)
        assert got[lab]["studentized"] == pytest.approx(inf.resid_studentized_external[i], rel=1e-7)
        assert got[lab]["cooks_d"] == pytest.approx(inf.cooks_distance[0][i], rel=1e-7)
        assert got[lab]["residual"] == pytest.approx(ols.resid[i], rel=1e-8, abs=1e-12)


def test_whitening_refuses_a_singular_covariance():
    """Two tips with zero-length edges to the same parent have identical rows of C: at lambda = 1
    the covariance is singular and no whitened residual exists (a clear ValueError, not a wrong
    number)."""
    from comparo.fitting.flags import phylo_whitener
    from comparo.phylo import flat_tree

    ft = flat_tree("((a:0,b:0):1,(c:0.5,d:0.5):0.5);")
    with pytest.raises(ValueError, match="singular"):
        phylo_whitener(ft, 1.0)
    assert np.all(np.isfinite(phylo_whitener(ft, 0.5)))
