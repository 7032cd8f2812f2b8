"""Reproducibility through the command line, as a user runs it.

* Every command that samples (``fit --bootstrap``, ``fit --sensitivity`` with its
  Monte Carlo, ``derive --mc``) takes ``--seed``: the same seed gives byte-identical
  output, another seed gives different draws where the draws are visible.
* No command modifies its input: SHA-256 of every file of the dataset folder
  (``support.tree_hash``: relative paths and bytes) is the same before and after
  check, table, audit, derive, fit and export.

Each command runs on its own copy of the synthetic demo compilation (invented data),
so a change to an input is pinned on one command. The subprocesses run concurrently
(one per core) to keep the module fast; ``report``/``demo`` are not run here.
"""

from __future__ import annotations

import csv
import io
import json
import os
import shutil
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pytest
from support import DEMO, demo_taxa, run_cli, tree_hash

# one worker builds the module fixture (the ten commands, ~15 s) instead of each worker
pytestmark = pytest.mark.xdist_group("repro")

SEED, OTHER = 11, 12
FIT = ("--x", "body_mass", "--y", "frequency_observed", "--method", "sma", "--format", "json")
# bootstrap and sensitivity in one invocation: each draws from its own default_rng(seed), so one run
# checks both, and three fit runs instead of six keep the module under its time budget
SAMPLED_FIT = ("fit", "{data}", *FIT, "--bootstrap", "200", "--sensitivity", "--mc", "50")
DERIVE = ("derive", "{data}", "--mc", "200")

RUNS: dict[str, tuple[str, ...]] = {
    "fit_a": (*SAMPLED_FIT, "--seed", str(SEED)),
    "fit_b": (*SAMPLED_FIT, "--seed", str(SEED)),
    "fit_c": (*SAMPLED_FIT, "--seed", str(OTHER)),
    "derive_a": (*DERIVE, "--seed", str(SEED)),
    "derive_b": (*DERIVE, "--seed", str(SEED)),
    "derive_c": (*DERIVE, "--seed", str(OTHER)),
    "check": ("check", "{data}", "--format", "json"),
    "table": ("table", "{data}", "-o", "{out}/table.csv"),
    "audit": ("audit", "{data}", "--format", "json", "-o", "{out}/audit"),
    "export": ("export", "{data}", "--to", "datapackage", "-o", "{out}/package"),
}


@pytest.fixture(scope="module")
def runs(tmp_path_factory) -> dict[str, dict]:
    """Run every command of RUNS once, each on a fresh copy of the demo; hash the copy before
    and after."""
    base = tmp_path_factory.mktemp("repro")
    jobs = {}
    for name, template in RUNS.items():
        data, out = base / name / "data", base / name / "out"
        shutil.copytree(DEMO, data)
        out.mkdir()
        args = tuple(a.format(data=data, out=out) for a in template)
        jobs[name] = {"data": data, "out": out, "args": args, "before": tree_hash(data)}

    def one(name: str):
        return name, run_cli(*jobs[name]["args"], timeout=120)

    with ThreadPoolExecutor(max_workers=max(2, os.cpu_count() or 2)) as pool:
        for name, proc in pool.map(one, jobs):
            jobs[name]["proc"] = proc
            jobs[name]["after"] = tree_hash(jobs[name]["data"])
    return jobs


def _ok(job: dict):
    proc = job["proc"]
    assert proc.returncode == 0, (job["args"], proc.stderr[-2000:])
    return proc


def _rows(text: str) -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(text)))


# --- same seed: identical; other seed: different draws ------------------------------------------


def test_fit_bootstrap_same_seed_identical_other_seed_differs(runs):
    """``fit --bootstrap 200 --sensitivity --mc 50 --seed S``: JSON byte-identical for the same S;
    the percentile and BCa intervals move with another seed while the point estimate (no sampling)
    stays put."""
    a, b, c = (_ok(runs[k]).stdout for k in ("fit_a", "fit_b", "fit_c"))
    assert a == b
    ja, jc = json.loads(a), json.loads(c)
    assert ja["bootstrap"]["seed"] == SEED and jc["bootstrap"]["seed"] == OTHER
    assert ja["bootstrap"]["resamples"] == 200
    assert ja["slope"] == jc["slope"] and ja["slope_ci"] == jc["slope_ci"]
    for part in ("slope", "intercept"):
        for kind in ("percentile", "bca"):
            assert ja["bootstrap"][part][kind] != jc["bootstrap"][part][kind], (part, kind)


def test_fit_sensitivity_same_seed_identical_other_seed_differs(runs):
    """The same runs, sensitivity part: the Monte Carlo measurement-error part records its seed
    and changes with another seed; the deterministic parts (leave-one-source-out, jackknife) do
    not."""
    a, b, c = (_ok(runs[k]).stdout for k in ("fit_a", "fit_b", "fit_c"))
    assert a == b
    sa, sc = json.loads(a)["sensitivity"], json.loads(c)["sensitivity"]
    me_a, me_c = sa["measurement_error"], sc["measurement_error"]
    assert me_a["draws"] == 50 and me_a["seed"] == SEED and me_c["seed"] == OTHER
    assert (me_a["slope_mean"], me_a["spread"]) != (me_c["slope_mean"], me_c["spread"])
    assert sa["leave_one_source_out"] == sc["leave_one_source_out"]
    assert sa["jackknife_se"] == sc["jackknife_se"]


def test_derive_monte_carlo_same_seed_identical_other_seed_differs(runs):
    """``derive --mc 200 --seed S``: CSV byte-identical for the same S; with another seed the
    Monte Carlo columns (``*_mc_*``) change and the first-order values and uncertainties do
    not."""
    a, b, c = (_ok(runs[k]).stdout for k in ("derive_a", "derive_b", "derive_c"))
    assert a == b
    ra, rc = _rows(a), _rows(c)
    assert len(ra) == len(rc) == demo_taxa()
    assert [r["taxon"] for r in ra] == [r["taxon"] for r in rc]
    mc_cols = [k for k in ra[0] if "_mc_" in k]
    first_order = ["poroelastic_time", "poroelastic_time_u", "kinetic_time", "kinetic_time_u"]
    first_order = [k for k in first_order if k in ra[0]]
    assert mc_cols and len(first_order) == 4
    changed = sum(x[k] != y[k] for x, y in zip(ra, rc, strict=True) for k in mc_cols if x[k])
    assert changed > 0.9 * sum(bool(x[k]) for x in ra for k in mc_cols)
    for x, y in zip(ra, rc, strict=True):
        assert all(x[k] == y[k] for k in first_order), x["taxon"]


# --- inputs never modified ----------------------------------------------------------------------


@pytest.mark.parametrize("name", list(RUNS))
def test_command_leaves_every_input_file_byte_identical(runs, name):
    """SHA-256 over every file (and file name) of the dataset folder is unchanged by the
    command, and the command wrote nothing into that folder."""
    job = runs[name]
    _ok(job)
    assert job["after"] == job["before"], f"{job['args'][0]} changed the dataset folder"
    names = sorted(p.name for p in job["data"].iterdir())
    assert names == sorted(p.name for p in Path(DEMO).iterdir())


def test_commands_with_an_output_option_wrote_there(runs):
    """The outputs that went to ``-o`` exist outside the dataset folder (so the hash check above
    saw a real run)."""
    assert _rows((runs["table"]["out"] / "table.csv").read_text(encoding="utf-8"))
    assert (runs["audit"]["out"] / "audit" / "audit.json").is_file()
    assert (runs["export"]["out"] / "package" / "datapackage.json").is_file()
    report = json.loads(_ok(runs["check"]).stdout)
    assert report["rows_read"] > 0 and report["errors"] == 0
