"""Behaviour of comparo.phylo: reading trees, matching tips, exclusions, result shapes."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from support import FIT_JSON_KEYS

from comparo import phylo
from comparo.base.errors import InputError, UsageError

FOUR = "((A:1,B:2):1,(C:1.5,D:0.5):0.5);"

CONTRACT_KEYS = FIT_JSON_KEYS - {"terms"}  # the pgls record: terms come with the FitResult


def small_table(seed=1, n=30):
    nw = phylo.random_newick(n, seed, ultrametric=True)
    rng = np.random.default_rng(seed)
    x = 10 ** rng.uniform(-2, 3, size=n)
    y = 50 * x**-0.2 * 10 ** rng.normal(scale=0.1, size=n)
    return nw, pd.DataFrame({"taxon": [f"t{i + 1}" for i in range(n)], "mass": x, "freq": y})


# --------------------------------------------------------------------------- reading


def test_read_tree_from_file_and_text(tmp_path):
    f = tmp_path / "tree.nwk"
    f.write_text("((Apis_mellifera:1,Bombus:1):1,Musca:2);\n")
    t = phylo.read_tree(str(f))
    assert sorted(nd.label for nd in t.leaf_node_iter()) == ["Apis_mellifera", "Bombus", "Musca"]
    t2 = phylo.read_tree("((A:1,B:1):1,C:2)")  # no final ';'
    assert len(t2.leaf_nodes()) == 3


def test_missing_branch_lengths_name_the_file(tmp_path):
    f = tmp_path / "nolengths.nwk"
    f.write_text("((A,B),C);")
    with pytest.raises(InputError) as exc:
        phylo.read_tree(str(f))
    prob = exc.value.problems.iloc[0]
    assert prob["file"] == str(f)
    assert prob["rule"] == "tree-branch-lengths"
    assert "branch length" in prob["message"]


@pytest.mark.parametrize(
    "text,rule",
    [
        ("((A:1,B:1):1,C:1;", "newick-syntax"),
        ("(A:1,B:1));", "newick-syntax"),
        ("(A:x,B:1);", "newick-syntax"),
        ("(A:1,A:2);", "tree-duplicate-tip"),
        ("(A:1,B:1);(C:1,D:1);", "tree-count"),
        ("(A:1,B:-1);", "tree-branch-lengths"),
    ],
)
def test_bad_newick_is_input_error(text, rule):
    with pytest.raises(InputError) as exc:
        phylo.read_tree(text)
    assert exc.value.problems.iloc[0]["rule"] == rule


def test_tree_file_not_found(tmp_path):
    with pytest.raises(InputError) as exc:
        phylo.read_tree(str(tmp_path / "nope.nwk"))
    assert exc.value.problems.iloc[0]["rule"] == "missing-file"


def test_deep_ladder_parses_and_limits_restored():
    import sys

    before = sys.getrecursionlimit()
    n = 5000
    nw = "".join(f"(t{i}:1," for i in range(n - 1)) + f"t{n - 1}:1" + "):1" * (n - 2) + ");"
    t = phylo.read_tree(nw)
    assert len(t.leaf_nodes()) == n
    assert sys.getrecursionlimit() == before
    ft = phylo.flat_tree(t)
    assert len(ft.bounds) - 1 == n  # levels: tips at 0, root at n - 1
    assert ft.tip_dist.max() == pytest.approx(n - 1)


# --------------------------------------------------------------------------- matching


def test_match_reports_both_lists():
    tree = "(((Apis_mellifera:1,Bombus_terrestris:1):1,Musca:2):1,(Tipula:1,Aedes:1):2);"
    labels = ["apis mellifera", "Bombus terrestris", "MUSCA", "Homo sapiens", "Manduca sexta"]
    m = phylo.match_tips(tree, labels)
    assert [(a, b) for a, b, _ in m.pairs] == [
        ("apis mellifera", "Apis_mellifera"),
        ("Bombus terrestris", "Bombus_terrestris"),
        ("MUSCA", "Musca"),
    ]
    assert m.taxa_without_tips == ("Homo sapiens", "Manduca sexta")
    assert set(m.tips_without_data) == {"Tipula", "Aedes"}
    d = m.to_dict()
    assert d["taxa_without_tips"] == ["Homo sapiens", "Manduca sexta"]
    assert "pruned" in m.summary()


def test_match_uses_tree_label_first():
    tree = "((Apis_mellifera:1,Bombus:1):1,Musca:2);"
    m = phylo.match_tips(
        tree,
        ["honey bee", "bumblebee", "Musca"],
        tree_labels={"honey bee": "Apis_mellifera", "bumblebee": "bombus"},
    )
    assert ("honey bee", "Apis_mellifera", "tree_label") in m.pairs
    assert ("bumblebee", "Bombus", "tree_label") in m.pairs
    assert ("Musca", "Musca", "name") in m.pairs
    # Musca's tip is already claimed by Bombus' explicit label: ambiguity is an error
    with pytest.raises(InputError):
        phylo.match_tips(tree, ["Bombus", "Musca"], tree_labels={"Bombus": "Musca"})


def test_match_ambiguous_tips_and_duplicate_taxa():
    with pytest.raises(InputError):
        phylo.match_tips("((Apis_mellifera:1,apis mellifera:1):1,C:1);", ["C"])
    with pytest.raises(InputError):
        phylo.match_tips(FOUR, ["A", "A", "B"])


# --------------------------------------------------------------------------- phylo_fit


def test_pgls_contract_keys_and_json():
    nw, df = small_table()
    r = phylo.pgls(df, "mass", "freq", tree=nw, against=-0.25)
    assert CONTRACT_KEYS <= set(r)
    assert r["method"] == "pgls" and r["log"] == "10" and r["n"] == 30
    assert r["outliers"] == [] and r["breakpoint"] is None and r["sensitivity"] is None
    assert set(r["against"]) == {"value", "statistic", "test", "df", "p"}
    assert r["lambda_ci"][0] <= r["lambda"] <= r["lambda_ci"][1]
    assert set(r["lambda_tests"]) >= {"lambda_0", "lambda_1"}
    json.dumps(r, allow_nan=False)
    assert r["slope_ci"][0] < r["slope"] < r["slope_ci"][1]
    # slope of about -0.2 was simulated; the CI is honest enough to hold it here
    assert r["slope_ci"][0] < -0.2 < r["slope_ci"][1]


def test_pgls_exclusions_listed_with_reasons():
    nw, df = small_table()
    df = df.copy()
    df.loc[0, "mass"] = -1.0
    df.loc[1, "freq"] = np.nan
    extra = pd.DataFrame({"taxon": ["Homo sapiens"], "mass": [70.0], "freq": [10.0]})
    df = pd.concat([df, extra], ignore_index=True)
    r = phylo.pgls(df, "mass", "freq", tree=nw, lambda_=1.0)
    reasons = {e["label"]: e["reason"] for e in r["excluded"]}
    assert reasons["t1"] == "non-positive mass under log 10"
    assert reasons["t2"] == "missing value of freq"
    assert reasons["Homo sapiens"] == "taxon not in the tree"
    assert r["n"] == 28
    assert set(r["tips_pruned"]) == {"t1", "t2"}
    assert r["taxa_without_tips"] == ["Homo sapiens"]
    assert r["lambda_ci"] is None and r["lambda_tests"] is None


def test_pgls_log_scales_relate():
    """Slope does not depend on the log base; the intercept scales by ln 10."""
    nw, df = small_table(seed=3)
    a = phylo.pgls(df, "mass", "freq", tree=nw, lambda_=0.8, log="10")
    b = phylo.pgls(df, "mass", "freq", tree=nw, lambda_=0.8, log="e")
    assert a["slope"] == pytest.approx(b["slope"], rel=1e-10)
    assert b["intercept"] == pytest.approx(a["intercept"] * np.log(10), rel=1e-10)


def test_pgls_zero_measurement_error_equals_none():
    nw, df = small_table(seed=4)
    df = df.assign(freq_u=0.0)
    a = phylo.pgls(df, "mass", "freq", tree=nw, lambda_=1.0)
    b = phylo.pgls(df, "mass", "freq", tree=nw, lambda_=1.0, tip_se=True)
    assert a["slope"] == pytest.approx(b["slope"], rel=1e-12)
    assert b["measurement_error"]["tips_with_error"] == 0


def test_pgls_measurement_error_lowers_rate():
    nw, df = small_table(seed=5)
    df = df.assign(freq_u=0.05 * df["freq"])
    a = phylo.pgls(df, "mass", "freq", tree=nw, lambda_=1.0)
    b = phylo.pgls(df, "mass", "freq", tree=nw, lambda_=1.0, tip_se="freq_u")
    assert b["measurement_error"]["tips_with_error"] == 30
    assert b["sigma2"] < a["sigma2"] * (30 - 2) / 30 + 1e-12


def test_pgls_usage_errors():
    nw, df = small_table()
    with pytest.raises(UsageError):
        phylo.pgls(df, "mass", "nope", tree=nw)
    with pytest.raises(UsageError):
        phylo.pgls(df, "mass", "freq", tree=nw, lambda_=1.5)
    with pytest.raises(UsageError):
        phylo.pgls(df, "mass", "freq", tree=nw, lambda_="high")
    with pytest.raises(UsageError):
        phylo.pgls(df.iloc[:2], "mass", "freq", tree=nw)


def test_pgls_groups():
    nw, df = small_table(seed=6, n=45)
    df = df.assign(clade=np.array(["a", "b", "c"])[np.arange(45) % 3])
    df.loc[44, "clade"] = "lonely"
    r = phylo.pgls(df, "mass", "freq", tree=nw, by="clade")
    assert [g["group"] for g in r["groups"]] == ["a", "b", "c"]
    assert sum(g["n"] for g in r["groups"]) == r["n"] == 44
    assert any("only taxon of group" in e["reason"] for e in r["excluded"])
    t = r["group_tests"]["common_slope"]
    assert t["df"] == [2, 44 - 6] and 0 <= t["p"] <= 1
    assert r["group_tests"]["elevation"]["df"] == [2, 44 - 4]
    json.dumps(r, allow_nan=False)


def test_zero_tip_edge_is_clear_error():
    df = pd.DataFrame({"taxon": list("ABCD"), "x": [1.0, 2, 3, 4], "y": [1.0, 3, 2, 5]})
    with pytest.raises(InputError) as exc:
        phylo.pgls(df, "x", "y", tree="((A:0,B:1):1,(C:1,D:1):1);", log="none", lambda_=1.0)
    assert exc.value.problems.iloc[0]["rule"] == "tree-zero-tip"
    # lambda < 1 gives the tip a positive variance
    r = phylo.pgls(df, "x", "y", tree="((A:0,B:1):1,(C:1,D:1):1);", log="none", lambda_=0.5)
    assert np.isfinite(r["slope"])
    # the ML search stops short of 1 and says so
    r = phylo.pgls(df, "x", "y", tree="((A:0,B:1):1,(C:1,D:1):1);", log="none", lambda_="ml")
    assert r["lambda_tests"]["search_interval"] == [0.0, 1.0 - 1e-6]
    assert r["lambda_ci"][1] <= 1.0 - 1e-6 and r["lambda_tests"]["note"]


# --------------------------------------------------------------------------- flat tree


def test_flat_tree_merges_unary_nodes_and_prunes():
    t = phylo.read_tree("(((A:1):2,B:3):1,(C:1,D:1):1);")
    ft = phylo.flat_tree(t)
    assert ft.n_tips == 4 and ft.n_nodes == 7
    idx = ft.index(["A", "B"])
    np.testing.assert_allclose(ft.length[idx], [3.0, 3.0])
    sub = phylo.flat_tree(t, ["A", "B"])  # root becomes unary: new root = MRCA(A, B)
    assert sub.n_nodes == 3
    np.testing.assert_allclose(sorted(sub.tip_dist), [3.0, 3.0])


def test_levels_are_post_order():
    ft = phylo.flat_tree(phylo.random_newick(200, 8, polytomy=0.3))
    par = ft.parent[:-1]
    assert np.all(par > np.arange(ft.n_nodes - 1))
    assert ft.parent[-1] == -1


# --------------------------------------------------------------------------- contrasts, signal


def test_pic_result_shapes():
    c = phylo.contrasts(FOUR, {"A": 0.0, "B": 1.0, "C": 2.0, "D": 3.0, "E": 9.0})
    assert c.contrasts.size == 3
    assert c.taxa_without_tips == ("E",)
    assert list(c.to_frame().columns) == ["contrast", "sd", "node_height"]
    json.dumps(c.to_dict(), allow_nan=False)
    assert "contrasts" in c.summary()


def test_signal_seeded_and_reproducible():
    nw = phylo.random_newick(60, 9, ultrametric=True)
    rng = np.random.default_rng(10)
    vals = {f"t{i + 1}": v for i, v in enumerate(rng.normal(size=60))}
    a = phylo.tree_signal(nw, vals, permutations=99, seed=3)
    b = phylo.tree_signal(nw, vals, permutations=99, seed=3)
    assert a.to_dict() == b.to_dict()
    assert 0 < a.K_p <= 1
    assert 0 <= a.lambda_ <= 1
    json.dumps(a.to_dict(), allow_nan=False)
    assert "Blomberg" in a.summary()


def test_signal_detects_bm_and_no_signal():
    """A trait simulated by BM on a 150-tip tree (seed 11) shows K near 1 and a small permutation
    p; white noise on the same tree gives lambda near 0 (tolerances: simulation spread)."""
    nw = phylo.random_newick(150, 11, ultrametric=True)
    ft = phylo.flat_tree(phylo.read_tree(nw))
    C = ft.covariance()
    rng = np.random.default_rng(12)
    bm = np.linalg.cholesky(C) @ rng.normal(size=ft.n_tips)
    s = phylo.tree_signal(nw, dict(zip(ft.tips, bm, strict=True)), permutations=199, seed=1)
    assert s.K_p < 0.05 and 0.4 < s.K < 2.5 and s.lambda_ > 0.5
    noise = rng.normal(size=ft.n_tips)
    s0 = phylo.tree_signal(nw, dict(zip(ft.tips, noise, strict=True)), permutations=99, seed=1)
    assert s0.lambda_ < 0.5


def test_accepts_dendropy_tree_with_taxa_and_checks_it():
    """Trees read elsewhere (dendropy with a taxon namespace, as the dataset reader does) are
    accepted and checked the same way."""
    import dendropy

    t = dendropy.Tree.get(
        data=FOUR, schema="newick", preserve_underscores=True, rooting="force-rooted"
    )
    df = pd.DataFrame({"taxon": list("ABCD"), "x": [0.0, 1, 2, 3], "y": [0.5, 1.9, 2.2, 3.8]})
    a = phylo.pgls(df, "x", "y", tree=t, log="none", lambda_=1.0)
    b = phylo.pgls(df, "x", "y", tree=FOUR, log="none", lambda_=1.0)
    assert a["slope"] == b["slope"]
    bad = dendropy.Tree.get(data="((A,B),(C:1,D:1));", schema="newick", rooting="force-rooted")
    with pytest.raises(InputError):
        phylo.pgls(df, "x", "y", tree=bad, log="none")
    with pytest.raises(InputError):
        phylo.check_tree(bad)


def test_cli_fit_pgls_bad_tree_exits_2(tmp_path, capsys):
    """Through the command line: a malformed tree is exit 2 with a message, no traceback."""
    from comparo.cli.main import main

    nw, df = small_table()
    data = tmp_path / "t.csv"
    df.to_csv(data, index=False)
    tree = tmp_path / "bad.nwk"
    tree.write_text("((t1:1,t2:1):1,t3:1;")
    code = main(
        ["fit", str(data), "--x", "mass", "--y", "freq", "--method", "pgls", "--tree", str(tree)]
    )
    err = capsys.readouterr().err
    assert code == 2
    assert "bad.nwk" in err and "Traceback" not in err
    good = tmp_path / "good.nwk"
    good.write_text(nw)
    code = main(
        [
            "fit",
            str(data),
            "--x",
            "mass",
            "--y",
            "freq",
            "--method",
            "pgls",
            "--tree",
            str(good),
            "--format",
            "json",
        ]
    )
    out = json.loads(capsys.readouterr().out)
    assert code == 0 and out["method"] == "pgls" and out["lambda_ci"] is not None
