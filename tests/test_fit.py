"""Behaviour of comparo.fitting (comparo.fit): the result object, input handling, simulations of CI
coverage and test size."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from support import FIT_JSON_KEYS

from comparo.base.errors import UsageError
from comparo.fitting import FitResult, common_slope_model2, fit, model2_line, ols_line

CONTRACT_KEYS = FIT_JSON_KEYS


def _table(n: int = 30, slope: float = 0.75, seed: int = 1, sd: float = 0.1) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    lx = rng.uniform(-2, 3, n)
    ly = 0.5 + slope * lx + rng.normal(0, sd, n)
    return pd.DataFrame(
        {
            "taxon": [f"t{i}" for i in range(n)],
            "body_mass": 10**lx,
            "freq": 10**ly,
            "clade": np.where(np.arange(n) % 2 == 0, "A", "B"),
        }
    )


# ---------------------------------------------------------------- result object


@pytest.mark.parametrize("method", ["ols", "sma", "ma", "robust", "lts"])
def test_to_dict_has_exactly_the_contract_keys_and_is_strict_json(method):
    """Common practice: the JSON contract of docs/cli.md; strict JSON (no NaN)."""
    r = fit(_table(), "body_mass", "freq", method, against=0.75)
    d = r.to_dict()
    assert set(d) == CONTRACT_KEYS
    json.dumps(d, allow_nan=False)
    assert d["method"] == method and d["n"] == 30 and d["ci_level"] == 0.95
    assert set(d["against"]) == {"value", "statistic", "test", "df", "p"}
    assert d["lambda"] is None and d["groups"] is None and d["breakpoint"] is None
    lo, hi = d["slope_ci"]
    assert lo < d["slope"] < hi


def test_optional_keys_appear_only_when_computed():
    r = fit(_table(), "body_mass", "freq", "sma", by="clade", bootstrap=200)
    d = r.to_dict()
    assert set(d) == CONTRACT_KEYS | {"group_tests", "bootstrap"}
    json.dumps(d, allow_nan=False)


def test_from_dict_round_trip_adapter():
    """The adapter used for PGLS results rebuilds an equal result from a contract dict."""
    r = fit(_table(), "body_mass", "freq", "ols", against=1.0)
    back = FitResult.from_dict(r.to_dict())
    assert back.to_dict() == r.to_dict()
    pg = dict(
        r.to_dict(), method="pgls", **{"lambda": 0.4, "lambda_ci": [0.1, 0.9], "loglik": -3.2}
    )
    res = FitResult.from_dict(pg)
    assert res.lambda_ == 0.4 and res.lambda_ci == (0.1, 0.9) and res.to_dict()["lambda"] == 0.4


def test_frame_points_and_summary():
    r = fit(_table(), "body_mass", "freq", "sma", by="clade", breakpoint=True)
    f = r.to_frame()
    assert {"method", "group", "term", "estimate", "ci_low", "ci_high", "n"} <= set(f.columns)
    assert f.loc[(f["term"] == "slope") & f["group"].isna(), "estimate"].item() == pytest.approx(
        r.slope
    )
    assert set(f["group"].dropna()) >= {"A", "B", "(common)", "(segmented)"}
    pts = r.points_frame()
    assert len(pts) == 30 and np.allclose(pts["residual"], pts["y_fit"] - pts["fitted"])
    text = r.summary()
    assert (
        "SMA" in text
        and "common exponent" in text
        and "one exponent for all groups?" in text
        and "breakpoint" in text
    )


def test_log_base_changes_intercept_not_slope():
    """Methods notes §1: ln-intercept = ln(10) x lg-intercept; the slope does not depend on the
    base."""
    t = _table()
    a = fit(t, "body_mass", "freq", "sma", log="10")
    b = fit(t, "body_mass", "freq", "sma", log="e")
    assert b.slope == pytest.approx(a.slope, rel=1e-12)
    assert b.intercept == pytest.approx(math.log(10) * a.intercept, rel=1e-12)


def test_unit_change_shifts_intercept_by_3b():
    """Methods notes §1: g -> kg shifts the lg-intercept by 3b (x in kg = x in g / 1000)."""
    t = _table()
    kg = fit(t.assign(body_mass=t["body_mass"] / 1000), "body_mass", "freq", "ols")
    g = fit(t, "body_mass", "freq", "ols")
    assert kg.slope == pytest.approx(g.slope)
    assert kg.intercept - g.intercept == pytest.approx(3 * g.slope, rel=1e-10)


def test_breakpoint_back_transformed():
    r = fit(_table(40), "body_mass", "freq", "ols", breakpoint=True)
    bp = r.breakpoint
    assert bp["x"] == pytest.approx(10 ** bp["x_log"])
    assert bp["x_ci"][0] < bp["x"] < bp["x_ci"][1]
    assert {
        "x_log",
        "x",
        "x_ci",
        "slope_left",
        "slope_left_ci",
        "slope_right",
        "slope_right_ci",
        "p_single_line",
    } <= set(bp)
    assert bp["p_single_line"] > 0.01  # the data are one straight line


def test_bootstrap_is_seeded():
    t = _table()
    a = fit(t, "body_mass", "freq", "sma", bootstrap=300, seed=4).bootstrap
    b = fit(t, "body_mass", "freq", "sma", bootstrap=300, seed=4).bootstrap
    c = fit(t, "body_mass", "freq", "sma", bootstrap=300, seed=5).bootstrap
    assert a == b and a != c
    assert a["resamples"] == 300 and a["seed"] == 4


def test_bootstrap_robust_loop_route():
    r = fit(_table(15), "body_mass", "freq", "robust", bootstrap=200)
    lo, hi = r.bootstrap["slope"]["percentile"]
    assert lo < r.slope < hi


# ---------------------------------------------------------------- input handling


def test_excluded_rows_are_listed_with_reasons():
    t = _table(10)
    t.loc[0, "body_mass"] = -3.0
    t.loc[1, "freq"] = 0.0
    t.loc[2, "freq"] = np.nan
    r = fit(t, "body_mass", "freq", "ols")
    assert r.n == 7
    ex = {e["label"]: e["reason"] for e in r.excluded}
    assert set(ex) == {"t0", "t1", "t2"}
    assert "not positive" in ex["t0"] and "not positive" in ex["t1"] and "missing freq" in ex["t2"]
    kept = fit(t.iloc[1:], "body_mass", "freq", "ols", log="none")
    assert {e["label"] for e in kept.excluded} == {"t2"}  # zero is fine without a log


def test_non_numeric_cell_is_excluded_not_dropped():
    t = _table(10).astype({"freq": object})
    t.loc[3, "freq"] = "n/a?"
    r = fit(t, "body_mass", "freq", "ols")
    assert r.n == 9 and "not a number" in r.excluded[0]["reason"]


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({"x": "nope"}, "not in the table"),
        ({"x": "taxon"}, "not numeric"),
        ({"method": "median"}, "unknown method"),
        ({"log": "2"}, "--log"),
        ({"ci": 1.5}, "--ci"),
    ],
)
def test_bad_requests(kwargs, message):
    args = {"x": "body_mass", "y": "freq", "method": "sma"} | kwargs
    with pytest.raises(UsageError, match=message):
        fit(_table(), **args)


def test_too_few_points_and_identical_x():
    t = _table(4)
    t.loc[:1, "body_mass"] = 0.0
    with pytest.raises(UsageError, match="at least 3 usable points"):
        fit(t, "body_mass", "freq", "ols")
    t = _table(6).assign(body_mass=5.0)
    with pytest.raises(UsageError, match="identical"):
        fit(t, "body_mass", "freq", "sma")


def test_pgls_options_rejected_for_other_methods():
    with pytest.raises(UsageError, match="pgls"):
        fit(_table(), "body_mass", "freq", "ols", tree="t.nwk")


# ---------------------------------------------------------------- simulations


def test_ci_coverage_and_test_size_ols_and_sma():
    """CI coverage by simulation (common practice): 1,000 data sets of n 20 with known slope 0.75,
    Gaussian errors, default_rng(2024). OLS: Y = 1 + 0.75 X + e; SMA under its own model: (X, Y)
    bivariate normal with s_Y/s_X = 0.75, r 0.8. 95% CIs must cover in 93-97% and the 5% slope tests
    reject in 3-7% (binomial sd at
    1,000 runs is 0.7 percentage points, so the bands are about 3 sd wide)."""
    rng = np.random.default_rng(2024)
    n, runs, b = 20, 1000, 0.75
    cov = np.array([[1.0, 0.8 * b], [0.8 * b, b * b]])
    ols_cover = sma_cover = ols_reject = sma_reject = 0
    for _ in range(runs):
        X = rng.normal(0, 1, n)
        Y = 1 + b * X + rng.normal(0, 0.5, n)
        o = ols_line(X, Y, 0.95, b)
        ols_cover += o.slope_ci[0] <= b <= o.slope_ci[1]
        ols_reject += o.test["p"] < 0.05
        Z = rng.multivariate_normal([0, 0], cov, n)
        s = model2_line(Z[:, 0], Z[:, 1], "sma", 0.95, b)
        sma_cover += s.slope_ci[0] <= b <= s.slope_ci[1]
        sma_reject += s.test["p"] < 0.05
    assert 0.93 <= ols_cover / runs <= 0.97
    assert 0.93 <= sma_cover / runs <= 0.97
    assert 0.03 <= ols_reject / runs <= 0.07
    assert 0.03 <= sma_reject / runs <= 0.07


def test_common_slope_test_size_and_power():
    """Common-slope LR test (Warton & Weber 2002): 1,000 simulations (default_rng(77)) of two groups
    of 20 bivariate-normal points sharing SMA slope 0.8 but differing in elevation reject in 3-7% at
    5% (common practice band, binomial sd 0.7 points); groups with slopes 0.5 and 1.5 are
    rejected."""
    rng = np.random.default_rng(77)
    cov = np.array([[1.0, 0.7 * 0.8], [0.7 * 0.8, 0.64]])
    rejects = 0
    for _ in range(1000):
        parts = []
        for shift in (0.0, 1.0):
            Z = rng.multivariate_normal([0, shift], cov, 20)
            parts.append((Z[:, 0], Z[:, 1]))
        rejects += common_slope_model2(parts, "sma", with_ci=False)["p"] < 0.05
    assert 0.03 <= rejects / 1000 <= 0.07
    X1, X2 = rng.normal(size=30), rng.normal(size=30)
    parts = [(X1, 0.5 * X1 + rng.normal(0, 0.1, 30)), (X2, 1.5 * X2 + rng.normal(0, 0.1, 30))]
    assert common_slope_model2(parts, "sma")["p"] < 1e-6
    assert common_slope_model2(parts, "ma")["p"] < 1e-6


def test_group_tests_elevation_and_shift():
    """Shared slope, different elevation -> elevation test rejects; one line, groups at different
    places along it -> shift test rejects and elevation test does not (seeded, default_rng(5))."""
    rng = np.random.default_rng(5)
    x = rng.uniform(0, 2, 60)
    g = np.repeat(["A", "B"], 30)
    y = 0.3 + 0.8 * x + np.where(g == "B", 0.5, 0.0) + rng.normal(0, 0.05, 60)
    t = pd.DataFrame({"taxon": [f"s{i}" for i in range(60)], "m": 10**x, "f": 10**y, "g": g})
    for method in ("sma", "ma", "ols"):
        r = fit(t, "m", "f", method, by="g")
        assert r.group_tests["common_slope"]["p"] > 0.001, method
        assert r.group_tests["elevation"]["p"] < 1e-6, method
        assert r.group_tests["common_slope"]["slope"] == pytest.approx(0.8, abs=0.05)
    # one SMA line with error on both axes (error sd ratio = slope, SMA's own model); group B sits 3
    # units further along
    true = rng.uniform(0, 2, 60) + np.where(g == "B", 3.0, 0.0)
    x2 = true + rng.normal(0, 0.05, 60)
    y2 = 0.3 + 0.8 * true + rng.normal(0, 0.04, 60)
    t2 = t.assign(m=10**x2, f=10**y2)
    r = fit(t2, "m", "f", "sma", by="g")
    assert r.group_tests["elevation"]["p"] > 0.001
    assert r.group_tests["shift"]["p"] < 1e-6


def test_ols_interaction_test_rejects_different_slopes():
    rng = np.random.default_rng(6)
    x = rng.uniform(0, 2, 40)
    g = np.repeat(["A", "B"], 20)
    y = np.where(g == "A", 0.5, 1.5) * x + rng.normal(0, 0.05, 40)
    t = pd.DataFrame({"m": 10**x, "f": 10**y, "g": g})
    r = fit(t, "m", "f", "ols", by="g")
    assert r.group_tests["common_slope"]["p"] < 1e-6
    assert [e["label"] for e in r.excluded] == []


def test_small_group_is_reported_not_dropped():
    t = _table(12)
    t.loc[:1, "clade"] = "C"
    t.loc[2:, "clade"] = np.where(np.arange(10) % 2, "A", "B")
    r = fit(t, "body_mass", "freq", "sma", by="clade")
    c = next(g for g in r.groups if g["group"] == "C")
    assert c["n"] == 2 and c["slope"] is None
    assert any("'C'" in note for note in r.notes)
    assert set(r.group_tests["groups"]) == {"A", "B"}  # C, with 2 rows, is left out


def test_lts_resists_a_cluster_of_bad_leverage_points():
    """A cluster of 6 bad leverage points (common practice demonstration of masking): OLS is pulled
    away, LTS keeps the slope of the clean majority and flags the cluster."""
    rng = np.random.default_rng(8)
    x = rng.uniform(0, 2, 30)
    y = 1.0 * x + rng.normal(0, 0.05, 30)
    xb = np.full(6, 4.0) + rng.normal(0, 0.02, 6)
    yb = np.full(6, 0.0) + rng.normal(0, 0.02, 6)
    t = pd.DataFrame(
        {
            "taxon": [f"c{i}" for i in range(30)] + [f"bad{i}" for i in range(6)],
            "m": np.r_[x, xb],
            "f": np.r_[y, yb],
        }
    )
    ols = fit(t, "m", "f", "ols", log="none")
    lts = fit(t, "m", "f", "lts", log="none")
    assert ols.slope < 0.5
    assert lts.slope == pytest.approx(1.0, abs=0.05)
    flagged = {o["label"] for o in lts.outliers if "LTS" in o["reason"]}
    assert {f"bad{i}" for i in range(6)} <= flagged


def test_elevation_test_size_when_groups_lie_apart_on_one_line():
    """Elevation test under H0 (common practice check of its size): 400 simulations
    (default_rng(31)) of two groups of 25 bivariate-normal points on one SMA line (error on both
    axes, sd ratio = slope), 2 units apart along it. The test
    allows for the error of the common slope, so it rejects in 2-8% at 5% (binomial sd 1.1
    points)."""
    from comparo.fitting import group_fits

    rng = np.random.default_rng(31)
    g = np.repeat(["A", "B"], 25)
    rejects = 0
    for _ in range(400):
        true = rng.normal(0, 0.3, 50) + np.where(g == "B", 2.0, 0.0)
        x = true + rng.normal(0, 0.1, 50)
        y = 0.8 * true + rng.normal(0, 0.08, 50)
        _, tests, _ = group_fits(x, y, g, "sma", 0.95, None, 0)
        rejects += tests["elevation"]["p"] < 0.05
    assert 0.02 <= rejects / 400 <= 0.08


@pytest.mark.parametrize("method", ["ols", "sma", "ma", "robust", "lts"])
def test_perfect_line_gives_a_zero_width_ci(method):
    """y = 3 x^0.5 exactly: rounding may push |r| a hair past 1; every method returns slope 0.5 with
    a degenerate interval instead of failing."""
    x = 10 ** np.linspace(0, 2, 40)
    t = pd.DataFrame({"taxon": [str(i) for i in range(40)], "x": x, "y": 3 * x**0.5})
    r = fit(t, "x", "y", method)
    assert r.slope == pytest.approx(0.5, abs=1e-12)
    assert r.slope_ci[0] == pytest.approx(0.5, abs=1e-9) and r.slope_ci[1] == pytest.approx(
        0.5, abs=1e-9
    )
