"""``comparo compare`` and the multiple-regression engine as a user meets them: the JSON contract,
derived quantities of a dataset folder as predictors, the same taxa for every model, the
Python API answering as the CLI, and exit 2 with a message for bad requests.

Numbers are checked against statsmodels and the AICc formulas in
tests/reference/test_multiple_statsmodels.py; here the checks are of behaviour, each
with an independent expectation (numpy least squares, the formula written out).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from support import DEMO

import comparo
from comparo.cli.main import main


@pytest.fixture
def csv(tmp_path):
    rng = np.random.default_rng(4)
    n = 30
    la, lb = rng.normal(size=(2, n))
    t = pd.DataFrame(
        {
            "taxon": [f"t{i + 1}" for i in range(n)],
            "mass": 10**la,
            "temp": 10**lb,
            "clade": rng.choice(["B", "A"], size=n),
        }
    )
    t["freq"] = 10 ** (1 - 0.25 * la + 0.5 * lb + 0.05 * rng.normal(size=n))
    t.loc[0, "temp"] = np.nan  # left out of every model
    p = tmp_path / "t.csv"
    t.to_csv(p, index=False)
    return p


def test_json_contract_sorted_by_aicc_and_same_taxa(csv, capsys):
    assert (
        main(
            [
                "compare",
                str(csv),
                "--y",
                "freq",
                "--model",
                "mass",
                "--model",
                "temp",
                "--model",
                "mass,temp",
                "--format",
                "json",
            ]
        )
        == 0
    )
    out = json.loads(capsys.readouterr().out)
    assert out["n"] == 29 and out["method"] == "ols" and out["likelihood"] == "ML"
    assert [e["label"] for e in out["excluded"]] == ["t1"] and "missing temp" in out["excluded"][0][
        "reason"
    ]
    models = out["models"]
    assert {"predictors", "k", "loglik", "aicc", "delta_aicc", "weight"} <= set(models[0])
    assert [m["aicc"] for m in models] == sorted(m["aicc"] for m in models)
    assert models[0]["predictors"] == ["mass", "temp"] and models[0]["delta_aicc"] == 0.0
    assert sum(m["weight"] for m in models) == pytest.approx(1.0)
    # the one-predictor model of mass is fitted on the 29 common taxa, not on the 30 having mass
    t = pd.read_csv(csv).dropna()
    X = np.column_stack([np.ones(len(t)), np.log10(t.mass)])
    b, rss, *_ = np.linalg.lstsq(X, np.log10(t.freq), rcond=None)
    m = next(m for m in models if m["predictors"] == ["mass"])
    assert m["terms"][1]["estimate"] == pytest.approx(b[1], rel=1e-10)
    assert m["loglik"] == pytest.approx(
        -len(t) / 2 * (math.log(2 * math.pi * rss[0] / len(t)) + 1), rel=1e-10
    )


def test_text_states_what_a_weight_is_not_and_the_reference_level(csv, capsys):
    assert (
        main(
            [
                "compare",
                str(csv),
                "--y",
                "freq",
                "--model",
                "mass",
                "--model",
                "1",
                "--factor",
                "clade",
            ]
        )
        == 0
    )
    text = " ".join(capsys.readouterr().out.split())
    assert "not the probability that the model is true" in text
    assert "a difference below 2 is not a preference" in text
    assert "reference level 'A'" in text and "clade[B]" in text
    assert "n = 30 taxa" in text and "left out" not in text  # temp is in no model here: t1 is kept


def test_python_api_answers_as_the_cli(csv, capsys):
    assert (
        main(
            [
                "compare",
                str(csv),
                "--y",
                "freq",
                "--model",
                "mass",
                "--model",
                "mass,temp",
                "--format",
                "json",
            ]
        )
        == 0
    )
    cli = json.loads(capsys.readouterr().out)
    api = comparo.compare(pd.read_csv(csv), "freq", ["mass", ["mass", "temp"]]).to_dict()
    assert api == cli


def test_derived_bounds_are_predictors_of_a_dataset_folder(capsys):
    """frequency_kinetic_bound is not a per-taxon column: compare derives it as `comparo derive`
    does."""
    assert (
        main(
            [
                "compare",
                str(DEMO),
                "--y",
                "frequency_observed",
                "--model",
                "body_mass",
                "--model",
                "frequency_kinetic_bound",
                "--model",
                "body_mass,frequency_kinetic_bound",
                "--format",
                "json",
            ]
        )
        == 0
    )
    out = json.loads(capsys.readouterr().out)
    preds = {tuple(m["predictors"]) for m in out["models"]}
    assert ("frequency_kinetic_bound",) in preds and out["n"] >= 10
    assert all(
        "frequency_kinetic_bound" in e["reason"]
        or "frequency_observed" in e["reason"]
        or "body_mass" in e["reason"]
        for e in out["excluded"]
    )


def test_pgls_on_the_dataset_tree(capsys):
    assert (
        main(
            [
                "compare",
                str(DEMO),
                "--y",
                "frequency_observed",
                "--model",
                "body_mass",
                "--model",
                "1",
                "--method",
                "pgls",
                "--lambda",
                "0.5",
                "--format",
                "json",
            ]
        )
        == 0
    )
    out = json.loads(capsys.readouterr().out)
    assert out["method"] == "pgls" and all(m["lambda"] == 0.5 for m in out["models"])
    assert all(
        m["k"] == len(m["predictors"]) + 2 for m in out["models"]
    )  # lambda fixed: not counted


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--model", "mass", "--model", "nonsense"], "'nonsense' not in the table"),
        (["--model", "mass"], "at least two models"),
        (["--model", "mass", "--model", "mass"], "repeats model 1"),
        (["--model", "mass", "--model", "temp", "--tree", "x.nwk"], "only to --method pgls"),
        (["--model", "mass", "--model", "temp", "--method", "pgls"], "needs a tree"),
        (["--model", "mass,mass", "--model", "temp"], "names a predictor twice"),
    ],
)
def test_bad_requests_exit_2(csv, capsys, extra, message):
    assert main(["compare", str(csv), "--y", "freq", *extra]) == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err


def test_too_few_taxa_exit_2(tmp_path, capsys):
    p = tmp_path / "few.csv"
    pd.DataFrame(
        {
            "taxon": list("abcde"),
            "x": [1, 2, 3, 4, 5],
            "z": [2, 1, 4, 3, 6],
            "y": [1.0, 2.2, 2.9, 4.1, 5.2],
        }
    ).to_csv(p, index=False)
    assert main(["compare", str(p), "--y", "y", "--model", "x", "--model", "x,z"]) == 2
    err = capsys.readouterr().err
    assert "needs at least 6 taxa" in err and "5 taxa" in err


def test_model_ii_with_several_predictors_is_refused():
    from comparo.base.errors import UsageError

    t = pd.DataFrame(
        {
            "taxon": list("abcdefgh"),
            "x": range(1, 9),
            "z": [3, 1, 4, 1, 5, 9, 2, 6],
            "y": range(2, 10),
        }
    )
    for method in ("sma", "ma"):
        with pytest.raises(UsageError, match="one predictor.*use --method ols or pgls"):
            comparo.fit_multiple(t, "y", ["x", "z"], method=method)


def test_collinear_predictors_exit_2(tmp_path, capsys):
    p = tmp_path / "col.csv"
    x = np.arange(1.0, 11.0)
    pd.DataFrame({"taxon": [f"t{i}" for i in range(10)], "x": x, "x2": x**2, "y": x * 1.5}).to_csv(
        p, index=False
    )
    assert main(["compare", str(p), "--y", "y", "--model", "x", "--model", "x,x2"]) == 2
    assert "collinear" in capsys.readouterr().err


def test_fit_with_several_x_json_text_and_csv(csv, capsys):
    base = ["fit", str(csv), "--y", "freq", "--x", "mass", "--x", "temp", "--method", "ols"]
    assert (
        main([*base, "--against", "mass=-0.25", "--against", "temp=0.5", "--format", "json"]) == 0
    )
    out = json.loads(capsys.readouterr().out)
    assert {"terms", "loglik", "aicc", "k", "n"} <= set(out) and out["n"] == 29 and out["k"] == 4
    assert [t["term"] for t in out["terms"]] == ["intercept", "mass", "temp"]
    assert out["against"]["terms"] == {"mass": -0.25, "temp": 0.5} and out["against"]["df"] == [
        2,
        26,
    ]
    t = pd.read_csv(csv).dropna()
    X = np.column_stack([np.ones(len(t)), np.log10(t.mass), np.log10(t.temp)])
    b, *_ = np.linalg.lstsq(X, np.log10(t.freq), rcond=None)
    assert [r["estimate"] for r in out["terms"]] == pytest.approx(b, rel=1e-10)
    assert main([*base, "--format", "csv"]) == 0
    assert capsys.readouterr().out.splitlines()[0] == "term,estimate,se,ci_low,ci_high,t,p"
    assert main(base) == 0
    assert "log-likelihood (ML)" in capsys.readouterr().out


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--x", "temp"], "use --method ols or pgls"),  # default method sma
        (["--x", "temp", "--method", "ma"], "use --method ols or pgls"),
        (["--x", "temp", "--method", "lts"], "use --method robust"),
        (["--x", "temp", "--method", "ols", "--by", "clade", "--factor", "clade"], "give one"),
        (["--x", "temp", "--method", "ols", "--against", "0.5"], "TERM=VALUE"),
        (["--x", "temp", "--method", "ols", "--against", "zzz=0.5"], "not a term of the model"),
        (["--x", "temp", "--method", "ols", "--against", "temp=nan"], "finite number"),
        (["--method", "ols", "--against", "1", "--against", "2"], "takes one value"),
        (["--method", "ols", "--against", "temp=1"], "is not the predictor"),
    ],
)
def test_fit_several_x_bad_requests_exit_2(csv, capsys, extra, message):
    assert main(["fit", str(csv), "--y", "freq", "--x", "mass", *extra]) == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err


def test_one_x_against_keeps_its_meaning(csv, capsys):
    """--against VALUE and --against X=VALUE with one --x give the same one-line test."""
    base = ["fit", str(csv), "--y", "freq", "--x", "mass", "--method", "ols", "--format", "json"]
    assert main([*base, "--against", "-0.3"]) == 0
    plain = json.loads(capsys.readouterr().out)["against"]
    assert main([*base, "--against", "mass=-0.3"]) == 0
    named = json.loads(capsys.readouterr().out)["against"]
    assert plain == named and plain["value"] == -0.3 and plain["test"] == "t"
