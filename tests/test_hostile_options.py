"""Hostile option values: each is a clear exit 2 before any work, never exit 3."""

from __future__ import annotations

import pytest
from support import DEMO, run_main

FIT = ["fit", str(DEMO), "--x", "body_mass", "--y", "frequency_observed"]

CASES = {
    "seed-negative": (FIT + ["--seed", "-1"], "--seed must be >= 0"),
    "derive-seed-negative": (["derive", str(DEMO), "--seed", "-1"], "--seed must be >= 0"),
    "report-seed-negative": (
        ["report", str(DEMO), "-o", "{tmp}/rep", "--seed", "-1"],
        "--seed must be >= 0",
    ),
    "against-nan": (FIT + ["--against", "nan"], "finite number"),
    "against-inf": (FIT + ["--against", "inf"], "finite number"),
    "lambda-with-sma": (FIT + ["--lambda", "0.5"], "--lambda applies only to --method pgls"),
    "reml-with-ols": (FIT + ["--method", "ols", "--reml"], "only to --method pgls"),
    "bootstrap-one": (FIT + ["--bootstrap", "1"], "too few resamples"),
    "bootstrap-199": (FIT + ["--bootstrap", "199"], "at least 200"),
    "bootstrap-huge": (FIT + ["--bootstrap", "1000000000"], "exceeds this machine's cap"),
    "bootstrap-huge-robust": (
        FIT + ["--method", "robust", "--bootstrap", "500000"],
        "refits per second",
    ),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_option_is_exit_2_with_the_rule(tmp_path, case):
    argv, words = CASES[case]
    proc = run_main(*[a.format(tmp=tmp_path) for a in argv])
    assert proc.returncode == 2, (proc.stdout[-500:], proc.stderr)
    assert words in proc.stderr and "Traceback" not in proc.stderr, proc.stderr
    assert not (tmp_path / "rep").exists()


def test_api_refuses_the_same_values():
    import comparo
    from comparo.base.errors import UsageError
    from comparo.fitting import fit

    tab = comparo.tabulate(comparo.load(DEMO))
    for kw in ({"seed": -1}, {"against": float("nan")}, {"bootstrap": 10}, {"bootstrap": 10**12}):
        with pytest.raises(UsageError):
            fit(tab, "body_mass", "frequency_observed", "sma", **kw)


def test_minimum_bootstrap_runs():
    """200 resamples (the floor) is accepted and gives ordered percentile and BCa ends."""
    proc = run_main(*FIT, "--bootstrap", "200", "--format", "json")
    assert proc.returncode == 0, proc.stderr
    import json

    b = json.loads(proc.stdout)["bootstrap"]
    assert b["resamples"] == 200
    lo, hi = b["slope"]["percentile"]
    assert lo < hi


@pytest.mark.parametrize(
    "argv,words",
    [
        (
            ["derive", "{ds}", "--mc", "100000000"],
            ["--mc 100000000", "cap of", "taxon-draws per second", "GiB"],
        ),
        (["derive", "{ds}", "--mc", "-3"], ["--mc", "0 or a positive"]),
        (
            [
                "fit",
                "{ds}",
                "--x",
                "body_mass",
                "--y",
                "frequency_observed",
                "--sensitivity",
                "--mc",
                "1000000000",
            ],
            ["--mc 1000000000", "cap of", "point-draws per second"],
        ),
    ],
)
def test_monte_carlo_sizes_beyond_the_machine_are_refused_at_once(tmp_path, capsys, argv, words):
    """A typo such as --mc 100000000 (21 GB and hours of derive) fails before any work, with
    the cap and how it was computed (the estimate of comparo.base.arguments)."""
    import time

    from support import DEMO

    from comparo.cli.main import main

    t0 = time.perf_counter()
    code = main([a.replace("{ds}", str(DEMO)) for a in argv])
    err = capsys.readouterr().err
    assert code == 2
    assert time.perf_counter() - t0 < 30
    for w in words:
        assert w in err, err


def test_derive_api_caps_draws_too():
    import re

    import pandas as pd

    from comparo.base.arguments import check_mc
    from comparo.base.errors import UsageError
    from comparo.derivation import derive

    with pytest.raises(UsageError, match="cap of") as info:
        check_mc(10**12, 10)
    cap = int(re.search(r"cap of (\d+)", str(info.value)).group(1))
    assert 0 < cap <= 600 * 5e5 / 10  # never above the time budget's count
    assert check_mc(cap, 10) == cap  # the stated cap itself is accepted
    with pytest.raises(UsageError, match="cap of"):
        check_mc(cap + 1, 10)
    with pytest.raises(UsageError, match="cap of"):
        derive(pd.DataFrame({"taxon": ["a"] * 10}), mc=10**9)


def test_signal_permutations_are_bounded():
    """A permutation count whose estimated time exceeds the budget is refused before any work."""
    import dendropy

    from comparo.base.errors import UsageError
    from comparo.phylo import random_newick, tree_signal

    tree = dendropy.Tree.get(
        data=random_newick(30, seed=2), schema="newick", preserve_underscores=True
    )
    values = {leaf.taxon.label: float(i) for i, leaf in enumerate(tree.leaf_node_iter())}
    with pytest.raises(UsageError, match="cap of"):
        tree_signal(tree, values, permutations=10**12)
    with pytest.raises(UsageError, match="0 or a positive"):
        tree_signal(tree, values, permutations=-1)
    assert tree_signal(tree, values, permutations=99).permutations == 99
