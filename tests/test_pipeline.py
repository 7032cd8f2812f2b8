"""One gate: ``comparo.check`` (the API) and ``comparo check`` (the command line) run the same
pipeline (comparo.pipeline.check) and report the same problems, errors, warnings and notes,
for the same folder; docs/cli.md's contract for ``check`` (exit 2 on an error, the JSON keys)
is unchanged."""

from __future__ import annotations

import json

import pytest
from support import VALID_ROWS, run_main, write_dataset

import comparo

TRACES_HEADER = (
    "trace_id,file,taxon,source_id,locator,kind,time_column,time_unit,x_column,x_unit,"
    "y_column,y_unit,temperature_c,muscle"
)


def _records(problems) -> list[tuple]:
    """Problems as comparable tuples (severity, file, row, column, value, rule, message)."""
    cols = ["severity", "file", "row", "column", "value", "rule", "message"]
    out = []
    for rec in problems:
        out.append(tuple("" if rec.get(c) is None else str(rec.get(c)) for c in cols))
    return out


def _both(folder):
    """What the API and the command line report for *folder*: (API result, CLI JSON, exit)."""
    api = comparo.check(folder)
    proc = run_main("check", str(folder), "--format", "json")
    return api, json.loads(proc.stdout), proc.returncode


@pytest.fixture
def broken(tmp_path):
    """A valid table beside three later-stage problems: a tree with a tip without a branch
    length, a trace file that does not exist, and a ``[derive]`` setting that is not one."""
    ds = write_dataset(tmp_path / "ds")
    # the Newick format (Felsenstein 1986, "The Newick tree format"; from memory): a branch length
    # follows its node after a colon; Bombus_terrestris has none, which a PGLS fit refuses
    (ds / "tree.nwk").write_text("((Apis_mellifera:1.0,Bombus_terrestris):1.0);\n")
    (ds / "traces.csv").write_text(
        TRACES_HEADER
        + "\nW1,loops/none.csv,Apis mellifera,s1,Fig. 5,work_loop,t,ms,x,mm,y,mN,30,flight\n"
    )
    (ds / "comparo.toml").write_text(
        '[derive]\npermeability_model = "no such model"\n\n'
        '[[analysis]]\nx = "body_mass"\ny = "frequency_observed"\nmethod = "no such method"\n'
    )
    return ds


def test_a_later_stage_problem_fails_the_api_and_the_cli_alike(broken):
    """The tree's missing branch length, the missing trace file and the bad settings of
    ``[derive]`` and ``[[analysis]]`` are errors of both, with the same rule ids."""
    api, cli, code = _both(broken)
    want = {"tree-branch-lengths", "trace-file-missing", "derive-setting", "analysis-setting"}
    api_rules = set(api.problems.loc[api.problems["severity"] == "error", "rule"])
    cli_rules = {p["rule"] for p in cli["problems"] if p["severity"] == "error"}
    assert want <= api_rules and api_rules == cli_rules, (api_rules, cli_rules)
    assert not api.ok and code == 2 and cli["errors"] == api.n_errors
    records = api.problems.astype(object).where(api.problems.notna(), None).to_dict("records")
    assert _records(records) == _records(cli["problems"])


@pytest.mark.parametrize("problem", ["tree", "trace", "settings"])
def test_each_later_stage_alone_fails_both(tmp_path, problem):
    """Each of the three on its own fails both (nothing hides behind another)."""
    ds = write_dataset(tmp_path / "ds")
    if problem == "tree":
        (ds / "tree.nwk").write_text("((Apis_mellifera:1.0,Bombus_terrestris):1.0);\n")
        rule = "tree-branch-lengths"
    elif problem == "trace":
        (ds / "traces.csv").write_text(
            TRACES_HEADER
            + "\nW1,none.csv,Apis mellifera,s1,Fig. 5,work_loop,t,ms,x,mm,y,mN,30,flight\n"
        )
        rule = "trace-file-missing"
    else:
        (ds / "comparo.toml").write_text('[derive]\npermeability_model = "no such model"\n')
        rule = "derive-setting"
    api, cli, code = _both(ds)
    assert rule in set(api.problems["rule"]) and rule in {p["rule"] for p in cli["problems"]}
    assert not api.ok and code == 2


def test_a_valid_folder_gives_the_same_warnings_and_notes(tmp_path):
    """With no error, curation's findings (a digitized value, a synonym, a conflict) and the
    tree's warnings come out of both alike, and the summary counts them the same."""
    rows = [*VALID_ROWS, "o9,Apis mellifera,body_mass,300,mg,,,,s2,Table 4,reported,,,"]
    ds = write_dataset(tmp_path / "ds", rows)
    (ds / "tree.nwk").write_text("((Apis_mellifera:1.0,Musca_domestica:1.0):1.0);\n")
    api, cli, code = _both(ds)
    assert api.ok and code == 0
    rules = set(api.problems["rule"])
    assert {"basis-digitized", "conflict", "taxon-without-tip"} <= rules, rules
    records = api.problems.astype(object).where(api.problems.notna(), None).to_dict("records")
    assert _records(records) == _records(cli["problems"])
    assert (cli["warnings"], cli["notes"]) == (api.n_warnings, api.n_notes)


def test_the_audit_of_the_api_carries_the_check_against_relatives(tmp_path):
    """comparo.audit composes the provenance audit with the tree check: with a tree the
    ``phylo_note`` says what was checked (here: too few taxa, so nothing), as ``comparo audit``
    does."""
    ds = write_dataset(tmp_path / "ds")
    (ds / "tree.nwk").write_text("((Apis_mellifera:1.0,Bombus_terrestris:1.0):1.0);\n")
    api = comparo.audit(comparo.load(ds)).to_dict()
    cli = json.loads(run_main("audit", str(ds), "--format", "json").stdout)
    assert api["phylo_note"] == cli["phylo_note"] and "nothing checked" in api["phylo_note"]
