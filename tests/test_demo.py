"""The synthetic demo compilation: reproducible from its seeded generator, and
every planted curation fault is reported by `comparo check` at its row."""

from __future__ import annotations

import csv
import json
import subprocess
import sys

from support import DEMO, ROOT, run_cli, tree_hash


def _rows(folder):
    with open(folder / "observations.csv", newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _row_of(folder, obs_id):
    """Spreadsheet row (header = 1) of an obs_id."""
    return next(i + 2 for i, r in enumerate(_rows(folder)) if r["obs_id"] == obs_id)


def test_generator_recreates_files_byte_for_byte(tmp_path):
    proc = subprocess.run([sys.executable, str(ROOT / "demo_tables" / "generate.py"), "-o", str(tmp_path / "g")], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    for f in DEMO.iterdir():
        assert (tmp_path / "g" / f.name).read_bytes() == f.read_bytes(), f.name


def test_demo_scenario_shape():
    rows = _rows(DEMO)
    taxa = {r["taxon"] for r in rows}
    assert 55 <= len(taxa) <= 65
    sources = {r["source_id"] for r in rows}
    assert 20 <= len(sources) <= 25
    with open(DEMO / "sources.csv", encoding="utf-8") as fh:
        assert all("synthetic" in r["citation"] for r in csv.DictReader(fh))


def test_every_planted_fault_reported_at_its_row(demo_copy):
    before = tree_hash(demo_copy)
    proc = run_cli("check", str(demo_copy), "--format", "json")
    assert proc.returncode == 0, proc.stderr  # faults are warnings and notes, not errors
    found = {(p["rule"], p["row"]) for p in json.loads(proc.stdout)["problems"]}
    row = lambda oid: _row_of(demo_copy, oid)  # noqa: E731
    assert ("unit-slip", row("DEMO-SLIP")) in found
    assert ("out-of-range", row("DEMO-SLIP")) in found
    assert ("conflict", row("DEMO-CONFLICT-A")) in found and ("conflict", row("DEMO-CONFLICT-B")) in found
    assert ("duplicate-row", row("DEMO-DUP")) in found
    assert ("basis-proxy", row("DEMO-PROXY")) in found
    assert ("temperature-missing", row("DEMO-NOTEMP")) in found
    digitized = [i + 2 for i, r in enumerate(_rows(demo_copy)) if r["basis"] == "digitized"]
    assert len(digitized) >= 3
    assert all(("basis-digitized", r) in found for r in digitized)
    assert tree_hash(demo_copy) == before


def test_clean_copy_passes_strictly(demo_copy):
    rows = _rows(demo_copy)
    cols = list(rows[0])
    clean = []
    for r in rows:
        if r["obs_id"] in ("DEMO-DUP", "DEMO-CONFLICT-B", "DEMO-PROXY"):
            continue
        if r["obs_id"] == "DEMO-SLIP":
            r["value"] = repr(float(r["value"]) * 1000)
        if r["obs_id"] == "DEMO-NOTEMP":
            r["temperature_c"] = "25"
        clean.append(r)
    with open(demo_copy / "observations.csv", "w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=cols, lineterminator="\n")
        w.writeheader()
        w.writerows(clean)
    proc = run_cli("check", str(demo_copy), "--strict", "--format", "json")
    problems = json.loads(proc.stdout)["problems"]
    assert proc.returncode == 0, [p for p in problems if p["severity"] != "note"]
    assert not [p for p in problems if p["severity"] != "note"]


def test_demo_command_runs_the_report(tmp_path):
    proc = run_cli("demo", "-o", str(tmp_path / "out"), "--quiet", timeout=180)
    assert proc.returncode == 0, proc.stderr
    out = tmp_path / "out"
    assert (out / "report.html").stat().st_size > 10_000
    assert (out / "tables" / "per_taxon.csv").stat().st_size > 0
    assert json.loads((out / "run.json").read_text())["seed"] == 20240601


def test_sma_exponent_ci_covers_the_generating_exponent():
    """The generator draws frequency = 30 M^-0.2 (clade offsets, noise; demo_tables/generate.py):
    the 95% CI of the fitted frequency-mass SMA slope (log10) covers -0.2."""
    import comparo
    from comparo.fit import fit

    res = fit(comparo.per_taxon(comparo.load(DEMO)), x="body_mass", y="frequency_observed", method="sma")
    lo, hi = res.slope_ci
    assert lo < -0.2 < hi
