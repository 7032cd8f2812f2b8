"""Several predictors with --by, --bootstrap and the taxon jackknife and measurement-error draws
of --sensitivity, each against an independent computation written here: statsmodels OLS for
the refits, statsmodels' influence (dfbeta) for the leave-one-out coefficients, the F test of
nested OLS models (statsmodels ``compare_f_test``) for common exponents across groups, and the
first-order (delta-method) variance of least-squares coefficients under noise in y,
A diag(var log y) A' with A = (X'X)^-1 X', for the measurement-error spread.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.stats.outliers_influence import OLSInfluence

from comparo.cli.main import main
from comparo.fitting.multiple import design, multiple_fit
from comparo.fitting.multiple_groups import multiple_by
from comparo.fitting.multiple_resampling import (
    bootstrap_terms,
    jackknife_terms,
    measurement_error_terms,
)


@pytest.fixture
def table():
    rng = np.random.default_rng(11)
    n = 48
    la, lb = rng.normal(size=(2, n))
    clade = np.repeat(["A", "B", "C"], n // 3)
    slope = np.where(clade == "C", -0.6, -0.25)  # clade C scales differently with mass
    ly = 1.0 + slope * la + 0.5 * lb + 0.08 * rng.normal(size=n)
    y = 10**ly
    return pd.DataFrame(
        {
            "taxon": [f"t{i}" for i in range(n)],
            "mass": 10**la,
            "temp": 10**lb,
            "clade": clade,
            "freq": y,
            "freq_u": 0.05 * y,
        }
    )


def _logs(t):
    return np.log10(t["freq"]), sm.add_constant(np.log10(t[["mass", "temp"]]))


def test_bootstrap_replicates_statsmodels_refits_of_the_same_resamples(table):
    """The same seeded resamples refitted by statsmodels OLS give the same percentile CIs."""
    fit = multiple_fit(table, "freq", ["mass", "temp"])
    d = design(table, "freq", ["mass", "temp"])
    b = bootstrap_terms(d, fit, 300, 5)
    y, X = _logs(table)
    rng = np.random.default_rng(5)
    est = np.array(
        [
            sm.OLS(y.iloc[idx].to_numpy(), X.iloc[idx].to_numpy()).fit().params
            for idx in (rng.integers(0, len(table), size=len(table)) for _ in range(300))
        ]
    )
    for j, t in enumerate(b["terms"]):
        assert t["ci"] == pytest.approx(list(np.quantile(est[:, j], [0.025, 0.975])), rel=1e-9)
        assert t["bootstrap_se"] == pytest.approx(np.std(est[:, j], ddof=1), rel=1e-9)
    assert b["failed"] == 0 and b["resamples"] == 300


def test_jackknife_matches_statsmodels_leave_one_out(table):
    fit = multiple_fit(table, "freq", ["mass", "temp"])
    j = jackknife_terms(table, fit)
    y, X = _logs(table)
    res = sm.OLS(y, X).fit()
    loo = res.params.to_numpy() - OLSInfluence(res).dfbeta  # b_(i), one row per taxon
    n = len(table)
    want = np.sqrt((n - 1) / n * ((loo - loo.mean(axis=0)) ** 2).sum(axis=0))
    assert j["n"] == n
    assert [t["jackknife_se"] for t in j["terms"]] == pytest.approx(list(want), rel=1e-8)


def test_measurement_error_spread_matches_the_first_order_variance(table):
    """Noise in y only (5 % standard uncertainty): the spread of each coefficient over 4000
    draws is within 6 % of sqrt(diag(A S A')), S = var(log10 y draw) = ln(1 + 0.05^2)/ln(10)^2."""
    fit = multiple_fit(table, "freq", ["mass", "temp"])
    d = design(table, "freq", ["mass", "temp"])
    m = measurement_error_terms(table, d, fit, 4000, 3)
    _, X = _logs(table)
    A = np.linalg.solve(X.T @ X, X.T)
    s2 = math.log1p(0.05**2) / math.log(10) ** 2
    want = np.sqrt(np.diag(A @ A.T) * s2)
    got = [t["spread"] for t in m["terms"]]
    assert got == pytest.approx(list(want), rel=0.06)
    assert m["fixed"] == {"freq": 0, "mass": len(table), "temp": len(table)}
    for t in m["terms"]:
        assert t["total_se"] == pytest.approx(math.hypot(t["spread"], t["sampling_se"]))


def test_by_fits_each_group_and_tests_common_exponents_as_statsmodels(table):
    res = multiple_by(table, "freq", ["mass", "temp"], "clade")
    for g in res["groups"]:
        part = table[table["clade"] == g["group"]]
        ref = sm.OLS(*_logs(part)).fit()
        assert [t["estimate"] for t in g["terms"]] == pytest.approx(list(ref.params), rel=1e-9)
    t = table.assign(lm=np.log10(table["mass"]), lt=np.log10(table["temp"]))
    t["ly"] = np.log10(t["freq"])
    import statsmodels.formula.api as smf

    full = smf.ols("ly ~ C(clade) * (lm + lt)", t).fit()
    reduced = smf.ols("ly ~ C(clade) + lm + lt", t).fit()
    f, p, q = full.compare_f_test(reduced)
    c = res["common_exponents"]
    assert c["statistic"] == pytest.approx(f, rel=1e-9) and c["p"] == pytest.approx(p, rel=1e-6)
    assert c["df"] == [int(q), int(full.df_resid)] and c["p"] < 0.001  # clade C differs


def test_cli_by_bootstrap_and_sensitivity(table, tmp_path, capsys):
    p = tmp_path / "t.csv"
    table.to_csv(p, index=False)
    base = ["fit", str(p), "--y", "freq", "--x", "mass", "--x", "temp", "--method", "ols"]
    assert main([*base, "--by", "clade", "--bootstrap", "50", "--format", "json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert len(out["by"]["groups"]) == 3 and out["by"]["common_exponents"]["df"][0] == 4
    assert len(out["resampling"]["bootstrap"]["terms"]) == 3
    assert main([*base, "--by", "clade", "--bootstrap", "50", "--sensitivity", "--mc", "20"]) == 0
    text = capsys.readouterr().out
    assert "fitted within each group of clade" in text and "case bootstrap" in text
    assert "jackknife" in text and "measurement error (Monte Carlo, 20 draws" in text


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--method", "pgls", "--bootstrap", "10"], "breaks the phylogenetic covariance"),
        (["--method", "lts"], "use --method robust"),
        (["--method", "ols", "--breakpoint"], "bends along one x"),
        (["--method", "ols", "--drop-flagged"], "without refitting"),
        (["--method", "pgls", "--reml"], "maximum likelihood"),
        (["--method", "ols", "--by", "nope"], "no such column"),
    ],
)
def test_what_is_not_offered_exits_2_saying_why(table, tmp_path, capsys, extra, message):
    p = tmp_path / "t.csv"
    table.to_csv(p, index=False)
    assert main(["fit", str(p), "--y", "freq", "--x", "mass", "--x", "temp", *extra]) == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err
