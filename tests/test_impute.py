"""comparo impute: the command (text, JSON, CSV), the Python API answering as the CLI, and
the refusals (exit 2). The numbers themselves are checked against a dense computation in
tests/reference/test_impute_blup.py; here one imputed value is checked the same way."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from support import run_main

import comparo

HEADER = (
    "obs_id,taxon,quantity,value,unit,uncertainty,uncertainty_kind,n,source_id,locator,basis,"
    "inputs,proxy_taxon,temperature_c"
)
ROWS = [  # invented values for the test (not the demo)
    "o1,Apis mellifera,body_mass,100,mg,5,sd,4,s1,Table 1,reported,,,",
    "o2,Bombus terrestris,body_mass,0.2,g,,,,s1,Table 1,reported,,,",
    "o3,Bombus pascuorum,body_mass,150,mg,,,,s1,Table 1,reported,,,",
    "o4,Vespa crabro,body_mass,450,mg,,,,s1,Table 1,reported,,,",
    "o5,Vespula vulgaris,body_mass,90,mg,,,,s1,Table 1,reported,,,",
    "o6,Musca domestica,body_mass,20,mg,,,,s1,Table 1,reported,,,",
    "o7,Calliphora vicina,body_mass,60,mg,,,,s1,Table 1,reported,,,",
    "o8,Delia radicum,body_mass,1,mg,,,,s1,Table 1,reported,,,",
    "o9,Manduca sexta,fiber_radius,30,um,,,,s1,Table 2,reported,,,",
    "o10,Anax junius,fiber_radius,25,um,,,,s1,Table 2,reported,,,",
    "o11,Bombyx mori,body_mass,1.5,g,,,,s1,Table 3,reported,,,",
]
TREE = (
    "(((((Apis_mellifera:2,(Bombus_terrestris:0.5,Bombus_pascuorum:0.5):1.5):1,(Vespa_crabro:1,"
    "Vespula_vulgaris:1):2):2,Manduca_sexta:5):1,(((Musca_domestica:1,Calliphora_vicina:1):2,"
    "Delia_radicum:3):2,Aedes_aegypti:5):1):2,Anax_junius:8);"
)
SOURCES = "source_id,citation,year,doi\ns1,Invented A. (2001) Test source one,2001,10.1000/abc\n"


@pytest.fixture
def insects(tmp_path):
    d = tmp_path / "insects"
    d.mkdir()
    (d / "observations.csv").write_text(HEADER + "\n" + "\n".join(ROWS) + "\n", encoding="utf-8")
    (d / "sources.csv").write_text(SOURCES, encoding="utf-8")
    (d / "tree.nwk").write_text(TREE + "\n", encoding="utf-8")
    return d


def test_json_contract_and_the_api_answer_alike(insects):
    r = run_main("impute", str(insects), "--y", "body_mass", "--format", "json")
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    assert list(d) == [
        "quantity",
        "lambda",
        "with",
        "n_observed",
        "n_imputed",
        "taxa",
        "cross_validation",
    ]
    assert d["quantity"] == "body_mass" and d["with"] == []
    assert (d["n_observed"], d["n_imputed"]) == (8, 3)
    assert set(d["cross_validation"]) == {"rmse_log", "coverage"}
    for row in d["taxa"]:
        assert list(row) == ["taxon", "observed", "value", "log_value", "log_se", "pi"]
    by = {row["taxon"]: row for row in d["taxa"]}
    # tips without observations are imputed too (Aedes_aegypti: no row at all, named by its tip)
    imputed = {t for t, row in by.items() if not row["observed"]}
    assert imputed == {"Aedes_aegypti", "Anax junius", "Manduca sexta"}
    apis = by["Apis mellifera"]
    assert apis["value"] == pytest.approx(1e-4) and apis["pi"] is None
    # observed log_se: SD 5 mg over n = 4 is a standard uncertainty of 2.5 mg on 100 mg; on
    # log10, to first order, 0.025 / ln 10
    assert apis["log_se"] == pytest.approx(0.025 / math.log(10))
    assert by["Vespa crabro"]["log_se"] is None
    for t in ("Aedes_aegypti", "Anax junius", "Manduca sexta"):
        row = by[t]
        lo, hi = row["pi"]
        assert lo < row["value"] < hi and row["value"] == pytest.approx(10 ** row["log_value"])
    api = comparo.impute(insects, "body_mass")
    assert json.loads(json.dumps(api.to_dict())) == d
    assert "Bombyx mori" in api.taxa_without_tips


def test_an_imputed_value_equals_the_dense_blup_at_lambda_1(insects):
    """Goldberger (1962) BLUP with C from the tree, written out densely here (lambda = 1)."""
    from comparo.phylo.flat import flat
    from comparo.phylo.trees import as_topo

    d = json.loads(
        run_main(
            "impute", str(insects), "--y", "body_mass", "--lambda", "1", "--format", "json"
        ).stdout
    )
    ft = flat(as_topo(TREE), None)
    C = ft.covariance()
    by = {row["taxon"].replace(" ", "_"): row for row in d["taxa"]}
    y = np.array([by[t]["log_value"] if by[t]["observed"] else np.nan for t in ft.tips])
    o = np.isfinite(y)
    Ci = np.linalg.inv(C[np.ix_(o, o)])
    one = np.ones(o.sum())
    mu = one @ Ci @ y[o] / (one @ Ci @ one)
    m = ft.tips.index("Aedes_aegypti")
    c = C[o, m]
    pred = mu + c @ Ci @ (y[o] - mu)
    var = C[m, m] - c @ Ci @ c + (1 - c @ Ci @ one) ** 2 / (one @ Ci @ one)
    s2 = (y[o] - mu) @ Ci @ (y[o] - mu) / (o.sum() - 1)
    assert d["lambda"] == 1.0
    assert by["Aedes_aegypti"]["log_value"] == pytest.approx(pred, abs=1e-10)
    assert by["Aedes_aegypti"]["log_se"] == pytest.approx(math.sqrt(s2 * var), rel=1e-10)


def test_text_and_csv(insects, tmp_path):
    r = run_main("impute", str(insects), "--y", "body_mass")
    assert r.returncode == 0, r.stderr
    assert "8 observed, 3 imputed" in r.stdout and "leave-one-out" in r.stdout
    assert "Bombyx mori" in r.stdout  # a taxon with a value and no tip is named, not dropped
    assert "Aedes_aegypti" in r.stdout and "95% prediction interval" in r.stdout
    out = tmp_path / "imp.csv"
    r = run_main("impute", str(insects), "--y", "body_mass", "--format", "csv", "-o", str(out))
    assert r.returncode == 0 and r.stdout == ""
    import pandas as pd

    frame = pd.read_csv(out)
    assert list(frame.columns[:7]) == [
        "taxon",
        "observed",
        "value",
        "log_value",
        "log_se",
        "pi_low",
        "pi_high",
    ]
    assert len(frame) == 11 and frame["observed"].sum() == 8
    assert frame.loc[frame["observed"], "loo_log_value"].notna().all()
    html = comparo.impute(str(insects), "body_mass", lambda_=0.5)._repr_html_()
    assert "Aedes_aegypti" in html and "leave-one-out" in html


@pytest.mark.parametrize(
    "args, message",
    [
        (["--y", "no_such_quantity"], "unknown quantity"),
        (["--y", "fiber_radius"], "at least 5"),  # 2 observed taxa on the tree
        (["--y", "body_mass", "--lambda", "1.5"], "[0, 1]"),
        (["--y", "body_mass", "--lambda", "high"], "'ml' or a number"),
        (["--y", "sarcomere_length"], "no taxon has a value"),
    ],
)
def test_refusals_exit_2_with_a_message(insects, args, message):
    r = run_main("impute", str(insects), *args)
    assert r.returncode == 2 and message in r.stderr, r.stderr
    assert r.stdout == ""


def test_no_tree_exits_2(insects):
    (insects / "tree.nwk").unlink()
    r = run_main("impute", str(insects), "--y", "body_mass")
    assert r.returncode == 2 and "needs a tree" in r.stderr


def test_a_quantity_that_can_be_negative_is_refused(insects):
    toml = '[quantities.shift]\nunit = "dimensionless"\nkind = "fraction"\nrange = [-1, 1]\n'
    (insects / "comparo.toml").write_text(toml, encoding="utf-8")
    r = run_main("impute", str(insects), "--y", "shift")
    assert r.returncode == 2 and "can be negative" in r.stderr and "log10" in r.stderr, r.stderr


def test_a_tip_without_observations_is_named_by_its_taxa_row(insects):
    """taxa.csv maps a taxon with no observation to a tip (tree_label): the imputed tip carries
    that taxon's name, not the tip label."""
    taxa = "taxon,accepted_name,tree_label\nCulex pipiens,,Aedes_aegypti\n"
    (insects / "taxa.csv").write_text(taxa, encoding="utf-8")
    d = json.loads(run_main("impute", str(insects), "--y", "body_mass", "--format", "json").stdout)
    imputed = {row["taxon"] for row in d["taxa"] if not row["observed"]}
    assert imputed == {"Culex pipiens", "Anax junius", "Manduca sexta"}


def test_with_a_correlated_quantity_json_lists_it_and_the_api_answers_alike(insects):
    """--with: the contract keys unchanged, "with" lists the quantity used; the API answers
    as the CLI; the numbers themselves are checked against a dense conditional Gaussian in
    tests/reference/test_impute_with.py."""
    extra = [  # invented muscle masses for the test, one on a tip without body mass
        "m1,Apis mellifera,muscle_mass,30,mg,,,,s1,Table 4,reported,,,",
        "m2,Bombus terrestris,muscle_mass,70,mg,,,,s1,Table 4,reported,,,",
        "m3,Vespa crabro,muscle_mass,140,mg,,,,s1,Table 4,reported,,,",
        "m4,Musca domestica,muscle_mass,6,mg,,,,s1,Table 4,reported,,,",
        "m5,Delia radicum,muscle_mass,0.4,mg,,,,s1,Table 4,reported,,,",
        "m6,Manduca sexta,muscle_mass,400,mg,,,,s1,Table 4,reported,,,",
    ]
    path = insects / "observations.csv"
    path.write_text(path.read_text(encoding="utf-8") + "\n".join(extra) + "\n", encoding="utf-8")
    r = run_main(
        "impute", str(insects), "--y", "body_mass", "--with", "muscle_mass", "--format", "json"
    )
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    assert d["with"] == ["muscle_mass"]
    assert list(d) == [
        "quantity",
        "lambda",
        "with",
        "n_observed",
        "n_imputed",
        "taxa",
        "cross_validation",
    ]
    assert (d["n_observed"], d["n_imputed"]) == (8, 3)
    api = comparo.impute(insects, "body_mass", with_=["muscle_mass"])
    assert json.loads(json.dumps(api.to_dict())) == d
    alone = comparo.impute(insects, "body_mass")
    by = {row["taxon"]: row for row in d["taxa"]}
    # Manduca's own muscle mass moves its prediction away from the relatives-only one
    i = alone.taxa.index("Manduca sexta")
    assert by["Manduca sexta"]["log_value"] != pytest.approx(alone.log_value[i], abs=1e-3)
    assert "evolutionary correlation muscle_mass" in api.summary()
    r = run_main("impute", str(insects), "--y", "body_mass", "--with", "body_mass")
    assert r.returncode == 2 and "--with lists body_mass" in r.stderr
    r = run_main("impute", str(insects), "--y", "body_mass", "--with", "nonesuch")
    assert r.returncode == 2 and "unknown quantity 'nonesuch'" in r.stderr
