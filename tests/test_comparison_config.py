"""``[[comparison]]`` in comparo.toml: checked up front by ``comparo check`` (each bad key
named), run by the report (a section with the table of models, the weight caution and n).

AICc and the Akaike weights of the report are recomputed here from their formulas,
AICc = -2 lnL + 2k + 2k(k+1)/(n-k-1) (Hurvich & Tsai 1989) and
w_i = exp(-Delta_i/2) / sum_j exp(-Delta_j/2) (Burnham & Anderson 2002, Model Selection and
Multimodel Inference, 2nd ed.).
"""

from __future__ import annotations

import json
import math

import pytest
from support import run_main

from comparo.base.errors import InputError
from comparo.fitting.declared import comparisons

BAD = """
[[comparison]]
y = "frequency_observd"
models = [["body_mass"]]
method = "sma"
factor = "no_such_column"
colour = "red"

[[comparison]]
y = "frequency_observed"
models = [["body_mass", "fiber_radius"], ["fiber_radius", "body_mass"], ["not_a_quantity"]]
"""


def test_check_names_every_bad_key(demo_copy):
    """Each broken setting is reported with its key, exit 2, in one pass."""
    toml = demo_copy / "comparo.toml"
    toml.write_text(
        toml.read_text(encoding="utf-8").split("[[comparison]]")[0] + BAD, encoding="utf-8"
    )
    p = run_main("check", str(demo_copy), "--format", "csv")
    assert p.returncode == 2
    out = p.stdout
    for key in (
        "comparison[1].y",
        "comparison[1].models",
        "comparison[1].method",
        "comparison[1].factor",
        "comparison[1].colour",
        "comparison[2].models[2]",
        "comparison[2].models[3]",
    ):
        assert key in out, key
    assert "repeats model 1" in out and "did you mean 'frequency_observed'" in out
    assert "unknown setting 'comparison'" not in out and "Traceback" not in p.stderr


def test_comparisons_raise_the_same_problems():
    """The report's reader raises what check reports; a good entry comes back as written."""
    from comparo.base.catalog import load_catalog

    cat = load_catalog()
    ok = {
        "comparison": [{"y": "frequency_observed", "models": [["body_mass"], []], "method": "ols"}]
    }
    assert comparisons(ok, cat, {"clade"}) == ok["comparison"]
    for bad, key in (
        (
            {"comparison": [{"y": "frequency_observed", "models": "body_mass"}]},
            "comparison[1].models",
        ),
        ({"comparison": 3}, "comparison"),
    ):
        with pytest.raises(InputError) as exc:
            comparisons(bad, cat, {"clade"})
        assert key in set(exc.value.problems["column"])


def test_report_runs_the_declared_comparison(demo_report):
    """The demo's comparison: a section with the table, the caution and n; the AICc and
    weights in comparisons.json recomputed from loglik, k and n by their formulas."""
    _, out, result = demo_report
    comps = json.loads((out / "tables" / "comparisons.json").read_text(encoding="utf-8"))
    assert len(comps) == 1 and "error" not in comps[0]
    r = comps[0]["result"]
    n = r["n"]
    aicc = [
        -2 * m["loglik"] + 2 * m["k"] + 2 * m["k"] * (m["k"] + 1) / (n - m["k"] - 1)
        for m in r["models"]
    ]
    assert [m["aicc"] for m in r["models"]] == pytest.approx(aicc, rel=1e-12)
    rel = [math.exp(-0.5 * (a - min(aicc))) for a in aicc]
    assert [m["weight"] for m in r["models"]] == pytest.approx(
        [v / sum(rel) for v in rel], rel=1e-9, abs=1e-15
    )
    assert aicc == sorted(aicc)
    assert len(r["models"]) == 5 and r["method"] == "pgls"
    # every taxon of the per-taxon table is either used or listed with its reason
    import pandas as pd

    taxa = pd.read_csv(out / "tables" / "per_taxon.csv")
    assert n + len(r["excluded"]) == len(taxa)
    html = (out / "report.html").read_text(encoding="utf-8")
    sec = html[html.index('id="comparisons"') :]
    assert "not the probability that the model is true" in sec and f"n = {n}" in sec
    assert comps[0]["id"] in sec and "tables/comparisons.json" in result.tables
    # the model-averaged coefficients: one row per predictor of any model, with the caveat
    names = {p for m in r["models"] for p in m["predictors"]}
    assert {a["term"] for a in r["averaged"]} == names
    assert "Model-averaged coefficients" in sec and "partial effect" in sec
    # the added-variable plots of the best-supported model with two or more predictors
    assert 'alt="added-variable plots' in sec and "Added-variable plots of" in sec
    assert "phylogenetically whitened" in comps[0]["added_variable_caption"]
