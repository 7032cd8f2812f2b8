"""Hostile option values: each is a clear exit 2 before any work, never exit 3."""

from __future__ import annotations

import pytest
from support import DEMO, run_cli

FIT = ["fit", str(DEMO), "--x", "body_mass", "--y", "frequency_observed"]

CASES = {
    "seed-negative": (FIT + ["--seed", "-1"], "--seed must be >= 0"),
    "derive-seed-negative": (["derive", str(DEMO), "--seed", "-1"], "--seed must be >= 0"),
    "report-seed-negative": (["report", str(DEMO), "-o", "{tmp}/rep", "--seed", "-1"], "--seed must be >= 0"),
    "against-nan": (FIT + ["--against", "nan"], "finite number"),
    "against-inf": (FIT + ["--against", "inf"], "finite number"),
    "lambda-with-sma": (FIT + ["--lambda", "0.5"], "--lambda applies only to --method pgls"),
    "reml-with-ols": (FIT + ["--method", "ols", "--reml"], "only to --method pgls"),
    "bootstrap-one": (FIT + ["--bootstrap", "1"], "too few resamples"),
    "bootstrap-199": (FIT + ["--bootstrap", "199"], "at least 200"),
    "bootstrap-huge": (FIT + ["--bootstrap", "1000000000"], "exceeds this machine's cap"),
    "bootstrap-huge-robust": (FIT + ["--method", "robust", "--bootstrap", "500000"], "refits per second"),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_option_is_exit_2_with_the_rule(tmp_path, case):
    argv, words = CASES[case]
    proc = run_cli(*[a.format(tmp=tmp_path) for a in argv], timeout=60)
    assert proc.returncode == 2, (proc.stdout[-500:], proc.stderr)
    assert words in proc.stderr and "Traceback" not in proc.stderr, proc.stderr
    assert not (tmp_path / "rep").exists()


def test_api_refuses_the_same_values():
    import comparo
    from comparo.errors import UsageError
    from comparo.lines import fit

    tab = comparo.per_taxon(comparo.load(DEMO))
    for kw in ({"seed": -1}, {"against": float("nan")}, {"bootstrap": 10}, {"bootstrap": 10**12}):
        with pytest.raises(UsageError):
            fit(tab, "body_mass", "frequency_observed", "sma", **kw)


def test_minimum_bootstrap_runs():
    """200 resamples (the floor) is accepted and gives ordered percentile and BCa ends."""
    proc = run_cli(*FIT, "--bootstrap", "200", "--format", "json")
    assert proc.returncode == 0, proc.stderr
    import json

    b = json.loads(proc.stdout)["bootstrap"]
    assert b["resamples"] == 200
    lo, hi = b["slope"]["percentile"]
    assert lo < hi
