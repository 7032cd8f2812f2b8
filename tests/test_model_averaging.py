"""Model-averaged coefficients of ``comparo compare`` (Burnham & Anderson 2002, Model Selection
and Multimodel Inference, 2nd ed., ch. 4: a term averaged over the models containing it with
renormalised Akaike weights; unconditional SE = sum w~_i sqrt(var_i + (b_i - b_bar)^2)).

The expectations are computed by hand here: each model refitted with statsmodels OLS, its
AICc from the formula, the weights, the average and the SE written out.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from comparo.cli.main import main
from comparo.fitting.comparison import compare, model_average

MODELS = [["a"], ["b"], ["a", "b"], ["a", "b", "c"]]


@pytest.fixture
def table():
    rng = np.random.default_rng(29)
    n = 40
    la, lb, lc = rng.normal(size=(3, n))
    lb = 0.6 * la + 0.8 * lb  # correlated predictors: the averages differ from each model's
    ly = 0.3 + 0.4 * la + 0.2 * lb + 0.25 * rng.normal(size=n)
    return pd.DataFrame(
        {"taxon": [f"t{i}" for i in range(n)], "a": 10**la, "b": 10**lb, "c": 10**lc, "y": 10**ly}
    )


def _by_hand(table):
    logs = np.log10(table[["a", "b", "c", "y"]])
    n = len(logs)
    fits = []
    for m in MODELS:
        res = sm.OLS(logs["y"], sm.add_constant(logs[m])).fit()
        k = len(m) + 2
        aicc = -2 * res.llf + 2 * k + 2 * k * (k + 1) / (n - k - 1)
        fits.append((m, res.params, res.bse, aicc))
    best = min(f[3] for f in fits)
    rel = [math.exp(-0.5 * (f[3] - best)) for f in fits]
    w = [r / sum(rel) for r in rel]
    out = {}
    for term in ("a", "b", "c"):
        got = [(wi, f[1][term], f[2][term]) for wi, f in zip(w, fits, strict=True) if term in f[0]]
        tot = sum(g[0] for g in got)
        est = sum(g[0] * g[1] for g in got) / tot
        se = sum(g[0] * math.sqrt(g[2] ** 2 + (g[1] - est) ** 2) for g in got) / tot
        out[term] = (est, se, len(got), tot)
    return out


def test_averages_match_the_hand_computation(table):
    """Each term's average, unconditional SE, model count and summed weight."""
    want = _by_hand(table)
    rows = compare(table, "y", MODELS).to_dict()["averaged"]
    assert [r["term"] for r in rows] and {r["term"] for r in rows} == {"a", "b", "c"}
    for r in rows:
        est, se, models, tot = want[r["term"]]
        assert r["estimate"] == pytest.approx(est, rel=1e-9)
        assert r["se"] == pytest.approx(se, rel=1e-9)
        assert r["models"] == models and r["weight"] == pytest.approx(tot, rel=1e-9)


def test_a_term_in_one_model_keeps_its_estimate_and_se():
    """Averaging over one model returns that model's numbers (the spread term is zero)."""

    class F:  # the two fields model_average reads
        def __init__(self, terms):
            self.terms = terms

    fits = [
        F(
            [
                {"term": "intercept", "estimate": 1.0, "se": 0.1},
                {"term": "x", "estimate": 2.0, "se": 0.3},
            ]
        ),
        F([{"term": "intercept", "estimate": 0.5, "se": 0.1}]),
    ]
    (row,) = model_average(fits, [0.25, 0.75])
    assert row == {"term": "x", "estimate": 2.0, "se": 0.3, "models": 1, "weight": 0.25}


def test_cli_json_and_text_carry_the_averages_and_the_caveat(table, tmp_path, capsys):
    p = tmp_path / "t.csv"
    table.to_csv(p, index=False)
    args = ["compare", str(p), "--y", "y"] + [a for m in MODELS for a in ("--model", ",".join(m))]
    assert main([*args, "--format", "json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert {"term", "estimate", "se", "models", "weight"} <= set(out["averaged"][0])
    assert "same log scale" in out["averaging_caution"]
    assert {"n", "method", "models", "caution"} <= set(out)  # the existing keys are kept
    assert main(args) == 0
    text = capsys.readouterr().out
    assert "Model-averaged coefficients" in text and "partial effect" in text
