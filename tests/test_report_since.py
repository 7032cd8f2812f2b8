"""``comparo report NEW -o DIR --since OLD``: the "What changed" section of the report.

The two versions are test input written for these tests (invented numbers, not the demo; the
compilation of tests/test_diff.py): NEW edits one value (o3, 190 -> 200 Hz) and removes one row
(o14). The section's slopes are checked against :func:`comparo.diff` and, by an independent
route, against :func:`comparo.fit` on each version's per-taxon table."""

from __future__ import annotations

import hashlib
import json
import re
import shutil
from html import unescape
from pathlib import Path

import pytest
from support import run_main
from test_diff import HEADER, ROWS, _write

import comparo


def _digest(folder: Path) -> dict[str, str]:
    return {
        str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def _tree(folder: Path) -> set[str]:
    return {str(p.relative_to(folder)) for p in folder.rglob("*")}


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    base = tmp_path_factory.mktemp("since")
    old = _write(base / "old")
    new = shutil.copytree(old, base / "new")
    rows = [r.replace(",190,", ",200,") if r.startswith("o3,") else r for r in ROWS]
    rows = [r for r in rows if not r.startswith("o14,")]
    (new / "observations.csv").write_text(HEADER + "\n" + "\n".join(rows) + "\n", encoding="utf-8")
    before = {"old": _digest(old), "new": _digest(new)}
    listing = _tree(base)
    out = base / "out"
    res = run_main("report", str(new), "-o", str(out), "--since", str(old), "--quiet")
    return {
        "old": old,
        "new": new,
        "out": out,
        "res": res,
        "before": before,
        "base": base,
        "listing": listing,
    }


def _section(out: Path) -> str:
    page = (out / "report.html").read_text(encoding="utf-8")
    start = page.index('<h2 id="since">')
    return page[start : page.index("<h2", start + 5)]


def test_the_section_lists_the_edits_and_sits_in_the_nav(run):
    assert run["res"].returncode == 0, run["res"].stderr
    page = (run["out"] / "report.html").read_text(encoding="utf-8")
    assert '<a href="#since">What changed</a>' in re.search(r"<nav>.*?</nav>", page).group(0)
    section = _section(run["out"])
    text = unescape(re.sub(r"<[^>]+>", " ", section))
    assert "What changed" in text and str(run["old"]) in text
    assert re.search(r"rows\s+o3\s+value\s+190\s+200\s+changed", text)
    assert re.search(r"rows\s+o14\s+removed", text)
    assert "rows: 0 added, 1 removed, 1 changed" in text
    # the conclusions come before the counts and the lists
    assert section.index("since-conclusions") < section.index("since-counts")
    assert section.index("since-counts") < section.index("since-lists")


def test_slopes_equal_the_diff_and_the_fit_on_each_version(run):
    """Independent route: comparo.fit on each version's per-taxon table (the analysis declared
    in comparo.toml: OLS of frequency on body mass, tested against -0.1)."""
    expected = comparo.diff(run["old"], run["new"]).to_dict()
    written = json.loads((run["out"] / "tables" / "since.json").read_text(encoding="utf-8"))
    assert written["analyses"] == expected["analyses"]
    assert written["rows"] == expected["rows"]
    (a,) = written["analyses"]
    table = re.search(r'<table[^>]*id="since-analyses".*?</table>', _section(run["out"]), re.S)
    values = [float(v) for v in re.findall(r'data-value="([^"]+)"', table.group(0))]
    for side in ("old", "new"):
        per_taxon = comparo.tabulate(comparo.load(run[side]))
        direct = comparo.fit(per_taxon, "body_mass", "frequency_observed", "ols", against=-0.1)
        assert a[f"slope_{side}"] == pytest.approx(direct.slope, rel=1e-12)
        assert direct.slope in values  # the HTML carries the full value of each slope
    assert a["slope_old"] != a["slope_new"]


def test_inputs_untouched_and_nothing_written_outside_the_output(run):
    assert _digest(run["old"]) == run["before"]["old"]
    assert _digest(run["new"]) == run["before"]["new"]
    record = json.loads((run["out"] / "run.json").read_text(encoding="utf-8"))
    assert record["since"]["inputs_sha256"] == run["before"]["old"]  # hashlib, file by file
    outside = {p for p in _tree(run["base"]) - run["listing"] if not p.startswith("out")}
    assert outside == set()


def test_missing_old_and_output_inside_old_exit_2(run, tmp_path):
    missing = run_main(
        "report", str(run["new"]), "-o", str(tmp_path / "a"), "--since", str(tmp_path / "nowhere")
    )
    assert missing.returncode == 2 and "Traceback" not in missing.stderr
    assert f"the older version {tmp_path / 'nowhere'} does not exist" in missing.stderr
    assert not (tmp_path / "a").exists()
    inside = run_main(
        "report", str(run["new"]), "-o", str(run["old"] / "report"), "--since", str(run["old"])
    )
    assert inside.returncode == 2
    assert f"is inside the input dataset folder {run['old']}" in inside.stderr
    assert _digest(run["old"]) == run["before"]["old"]
    with pytest.raises(comparo.UsageError, match="inside the input dataset folder"):
        comparo.build_report(run["new"], run["old"] / "r", since=run["old"], sensitivity_draws=0)


def test_an_old_version_with_problems_exits_2_naming_its_file(run, tmp_path):
    bad = shutil.copytree(run["old"], tmp_path / "bad")
    rows = [*ROWS, "o30,Apis mellifera,body_mass,heavy,mg,,,,s1,Table 9,reported,"]
    (bad / "observations.csv").write_text(HEADER + "\n" + "\n".join(rows) + "\n", encoding="utf-8")
    res = run_main("report", str(run["new"]), "-o", str(tmp_path / "out"), "--since", str(bad))
    assert res.returncode == 2 and "heavy" in res.stderr and "Traceback" not in res.stderr
    assert not (tmp_path / "out").exists()
