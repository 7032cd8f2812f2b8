"""``comparo fit --x X1 --x X2 --method robust``: the Huber M-estimate with several predictors.

Independent route: statsmodels RLM (HuberT, c = 1.345, the default MAD scale), called here on
a design matrix built in the test with numpy; the Wald chi-square is written out with scipy.
One --x through the multiple path agrees with the one-predictor robust line.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

import comparo
from comparo.cli.main import main
from comparo.fitting.multiple import multiple_fit


@pytest.fixture
def table():
    rng = np.random.default_rng(11)
    n = 40
    la, lb = rng.normal(size=(2, n))
    t = pd.DataFrame(
        {
            "taxon": [f"t{i + 1}" for i in range(n)],
            "mass": 10**la,
            "temp": 10**lb,
            "clade": rng.choice(["B", "A", "C"], size=n),
        }
    )
    t["freq"] = 10 ** (1 - 0.25 * la + 0.5 * lb + 0.05 * rng.normal(size=n))
    t.loc[5, "freq"] *= 20  # one gross error in y, which the Huber fit down-weights
    t.loc[0, "temp"] = np.nan  # left out
    return t


def _rlm(t, factor=False):
    import statsmodels.api as sm

    u = t.dropna()
    cols = [np.ones(len(u)), np.log10(u.mass), np.log10(u.temp)]
    if factor:
        cols += [(u.clade == "B").to_numpy(float), (u.clade == "C").to_numpy(float)]
    return sm.RLM(
        np.log10(u.freq).to_numpy(), np.column_stack(cols), M=sm.robust.norms.HuberT(t=1.345)
    ).fit()


@pytest.mark.parametrize("factor", [False, True])
def test_terms_match_statsmodels_rlm(table, factor):
    """Estimates, SEs, normal CIs, z and normal p against statsmodels RLM (HuberT 1.345, MAD)."""
    from scipy import stats

    r = multiple_fit(
        table, "freq", ["mass", "temp"], factor="clade" if factor else None, method="robust"
    )
    ref = _rlm(table, factor)
    est = [t["estimate"] for t in r.terms]
    se = [t["se"] for t in r.terms]
    assert est == pytest.approx(ref.params, rel=1e-9)
    assert se == pytest.approx(ref.bse, rel=1e-9)
    np.testing.assert_allclose(
        [t["ci"] for t in r.terms], np.asarray(ref.conf_int(0.05)), rtol=1e-9
    )
    z = np.asarray(ref.params) / np.asarray(ref.bse)
    assert [t["t"] for t in r.terms] == pytest.approx(z, rel=1e-9)
    assert [t["p"] for t in r.terms] == pytest.approx(
        2 * stats.norm.sf(np.abs(z)), rel=1e-6, abs=1e-300
    )
    assert r.n == len(table.dropna()) and math.isnan(r.loglik) and math.isnan(r.aicc)
    d = r.to_dict()
    assert d["loglik"] is None and d["aicc"] is None and d["likelihood"] is None
    assert any(o["label"] == "t6" and "Huber" in o["reason"] for o in r.outliers)


def test_joint_against_is_wald_chi_square(table):
    """W = d'(R V R')^-1 d on chi-square(q), d and V from statsmodels RLM, written out here."""
    from scipy import stats

    r = multiple_fit(
        table, "freq", ["mass", "temp"], method="robust", against={"mass": -0.3, "temp": 0.4}
    )
    ref = _rlm(table)
    dvec = np.asarray(ref.params)[1:] - [-0.3, 0.4]
    V = np.asarray(ref.cov_params())[1:, 1:]
    w = float(dvec @ np.linalg.inv(V) @ dvec)
    a = r.against
    assert a["statistic"] == pytest.approx(w, rel=1e-9) and a["df"] == [2, None]
    assert a["p"] == pytest.approx(stats.chi2.sf(w, 2), rel=1e-9) and "chi-square" in a["test"]


def test_one_x_through_the_multiple_path_agrees_with_the_robust_line(table):
    """The same Huber fit by both routes (the one-predictor robust line is statsmodels RLM too)."""
    u = table.dropna()
    r = multiple_fit(u, "freq", ["mass"], method="robust")
    line = comparo.fit(u, "mass", "freq", "robust")
    assert r.terms[1]["estimate"] == pytest.approx(line.slope, rel=1e-12)
    assert r.terms[0]["estimate"] == pytest.approx(line.intercept, rel=1e-12)
    assert r.terms[1]["ci"] == pytest.approx(list(line.slope_ci), rel=1e-12)
    for mine, theirs in zip(r.terms, line.to_dict()["terms"], strict=True):
        assert mine["term"] == theirs["term"]
        for key in ("estimate", "se", "t", "p"):
            assert mine[key] == pytest.approx(theirs[key], rel=1e-9)


def test_cli_robust_several_x(table, tmp_path, capsys):
    """The command line answers as the API; text says why there is no AICc."""
    p = tmp_path / "t.csv"
    table.to_csv(p, index=False)
    base = [
        "fit",
        str(p),
        "--y",
        "freq",
        "--x",
        "mass",
        "--x",
        "temp",
        "--method",
        "robust",
        "--against",
        "mass=-0.25",
        "--against",
        "temp=0.5",
    ]
    assert main([*base, "--format", "json"]) == 0
    out = json.loads(capsys.readouterr().out)
    api = multiple_fit(
        table, "freq", ["mass", "temp"], method="robust", against={"mass": -0.25, "temp": 0.5}
    )
    assert out["terms"] == api.to_dict()["terms"]
    assert out["against"]["df"] == [2, None] and out["aicc"] is None
    assert main(base) == 0
    text = capsys.readouterr().out
    assert "chi-square(2)" in text and "no AICc" in text
