"""Predictors that enter untransformed: ``temperature_c`` (degrees Celsius is an interval scale,
values may be <= 0, the log of a ratio of temperatures means nothing) and any named by
``--x-linear``. Coefficients checked against statsmodels OLS on log10 y, log10 mass and the
untransformed temperature, built in the test.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from comparo.cli.main import main
from comparo.fitting import compare, multiple_fit


@pytest.fixture
def table():
    rng = np.random.default_rng(7)
    n = 36
    lm = rng.normal(size=n)
    temp = rng.uniform(-2.0, 30.0, size=n)  # polar fish to warm insects: some at or below 0
    temp[0] = 0.0
    ly = 1.0 - 0.2 * lm + 0.03 * temp + 0.05 * rng.normal(size=n)
    return pd.DataFrame(
        {
            "taxon": [f"t{i}" for i in range(n)],
            "mass": 10**lm,
            "temperature_c": temp,
            "depth": rng.uniform(-5, 5, size=n),
            "freq": 10**ly,
        }
    )


def _ols(table, cols):
    X = sm.add_constant(pd.DataFrame(cols))
    return sm.OLS(np.log10(table["freq"]), X).fit()


def test_temperature_enters_untransformed_and_keeps_rows_at_or_below_zero(table):
    fit = multiple_fit(table, "freq", ["mass", "temperature_c"])
    ref = _ols(table, {"mass": np.log10(table["mass"]), "temperature_c": table["temperature_c"]})
    assert fit.n == len(table) and not fit.excluded
    got = {t["term"]: t for t in fit.terms}
    for name, b in zip(["const", "mass", "temperature_c"], ref.params, strict=True):
        key = "intercept" if name == "const" else name
        assert got[key]["estimate"] == pytest.approx(b, rel=1e-10)
    assert got["temperature_c"]["se"] == pytest.approx(ref.bse["temperature_c"], rel=1e-10)
    scales = {t["term"]: t["scale"] for t in fit.to_dict()["terms"]}
    assert scales == {"intercept": None, "mass": "log10", "temperature_c": "linear"}
    assert fit.to_dict()["linear"] == ["temperature_c"]


def test_x_linear_names_another_predictor_on_the_cli(table, tmp_path, capsys):
    p = tmp_path / "t.csv"
    table.to_csv(p, index=False)
    args = ["fit", str(p), "--y", "freq", "--x", "mass", "--x", "depth", "--method", "ols"]
    assert main([*args, "--x-linear", "depth", "--format", "json"]) == 0
    out = json.loads(capsys.readouterr().out)
    ref = _ols(table, {"mass": np.log10(table["mass"]), "depth": table["depth"]})
    est = {t["term"]: t["estimate"] for t in out["terms"]}
    assert est["depth"] == pytest.approx(ref.params["depth"], rel=1e-10)
    assert out["n"] == len(table) and out["linear"] == ["depth"]
    # without --x-linear, depth <= 0 is not loggable: those rows are left out, with the reason
    assert main([*args, "--format", "json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["n"] == int((table["depth"] > 0).sum())
    assert all("not positive (log transform)" in e["reason"] for e in out["excluded"])


def test_one_x_with_x_linear_is_the_multiple_fit(table, tmp_path, capsys):
    p = tmp_path / "t.csv"
    table.to_csv(p, index=False)
    assert (
        main(
            ["fit", str(p), "--y", "freq", "--x", "depth", "--x-linear", "depth"]
            + ["--method", "ols", "--format", "json"]
        )
        == 0
    )
    out = json.loads(capsys.readouterr().out)
    ref = _ols(table, {"depth": table["depth"]})
    assert out["terms"][1]["estimate"] == pytest.approx(ref.params["depth"], rel=1e-10)
    assert out["terms"][1]["scale"] == "linear"


def test_compare_says_which_predictors_are_linear(table, tmp_path, capsys):
    res = compare(table, "freq", ["mass", "mass,temperature_c"])
    d = res.to_dict()
    assert d["linear"] == ["temperature_c"] and d["n"] == len(table)
    assert "entered untransformed" in res.summary()


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--x-linear", "freq"], "y is always on the --log scale"),
        (["--x-linear", "nope"], "not a predictor of the model"),
    ],
)
def test_bad_x_linear_exits_2(table, tmp_path, capsys, extra, message):
    p = tmp_path / "t.csv"
    table.to_csv(p, index=False)
    args = ["fit", str(p), "--y", "freq", "--x", "mass", "--x", "depth", "--method", "ols"]
    assert main([*args, *extra]) == 2
    assert message in capsys.readouterr().err
