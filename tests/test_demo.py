"""The synthetic demo compilation: reproducible from its seeded generator, and
every planted curation fault is reported by `comparo check` at its row."""

from __future__ import annotations

import csv
import json
import subprocess
import sys

import pytest
from support import DEMO, ROOT, demo_taxa, run_cli, tree_hash


def _rows(folder):
    with open(folder / "observations.csv", newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _row_of(folder, obs_id):
    """Spreadsheet row (header = 1) of an obs_id."""
    return next(i + 2 for i, r in enumerate(_rows(folder)) if r["obs_id"] == obs_id)


def _generator():
    import importlib.util

    spec = importlib.util.spec_from_file_location(
        "demo_generate", ROOT / "demo_tables" / "generate.py"
    )
    mod = importlib.util.module_from_spec(spec)
    sys.modules.setdefault("demo_generate", mod)  # its dataclasses look their module up
    spec.loader.exec_module(sys.modules["demo_generate"])
    return sys.modules["demo_generate"]


def test_generator_recreates_files_byte_for_byte(tmp_path):
    proc = subprocess.run(
        [sys.executable, str(ROOT / "demo_tables" / "generate.py"), "-o", str(tmp_path / "g")],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 0, proc.stderr
    for f in DEMO.iterdir():
        assert (tmp_path / "g" / f.name).read_bytes() == f.read_bytes(), f.name


def test_demo_scenario_shape():
    rows = _rows(DEMO)
    taxa = {r["taxon"] for r in rows}
    gen = _generator()  # 60 ectotherm species, the warm-bodied clade and one older synonym
    assert len(taxa) == gen.N_TAXA + sum(k for _, k in gen.ENDO_SPECIES) + 1 == demo_taxa() + 1
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
    assert ("conflict", row("DEMO-CONFLICT-A")) in found and (
        "conflict",
        row("DEMO-CONFLICT-B"),
    ) in found
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
    from comparo.fitting import fit

    res = fit(
        comparo.tabulate(comparo.load(DEMO)), x="body_mass", y="frequency_observed", method="sma"
    )
    lo, hi = res.slope_ci
    assert lo < -0.2 < hi


# ------------------------------------------------------------- the tree and the names


def _taxa():
    with open(DEMO / "taxa.csv", newline="", encoding="utf-8") as fh:
        return [r for r in csv.DictReader(fh) if r["tree_label"]]


def _clusters_are_monophyletic(column: str) -> None:
    import dendropy

    tree = dendropy.Tree.get(
        path=str(DEMO / "tree.nwk"),
        schema="newick",
        preserve_underscores=True,
        rooting="force-rooted",
    )
    groups: dict[str, set[str]] = {}
    for r in _taxa():
        groups.setdefault(r[column], set()).add(r["tree_label"])
    tips = {leaf.taxon.label for leaf in tree.leaf_node_iter()}
    assert set().union(*groups.values()) == tips
    for name, members in groups.items():
        mrca = tree.mrca(taxon_labels=sorted(members))
        below = {leaf.taxon.label for leaf in mrca.leaf_iter()}
        assert below == members, (column, name, sorted(below - members))


def test_demo_clades_and_genera_are_clades_of_the_tree():
    """Checked with dendropy (an independent tree library): the tips under the most recent
    common ancestor of a genus (or a clade) of taxa.csv are exactly that group's species."""
    _clusters_are_monophyletic("genus")
    _clusters_are_monophyletic("clade")


# Names of real animal groups and genera that an invented demo must not reuse: major
# groups and a few genera often met in muscle physiology, plus older names of real groups
# (from memory: common knowledge of the major animal groups; not an exhaustive list).
REAL_GROUP_NAMES = {
    "animalia",
    "arthropoda",
    "insecta",
    "hexapoda",
    "diptera",
    "hymenoptera",
    "coleoptera",
    "lepidoptera",
    "orthoptera",
    "saltatoria",
    "ensifera",
    "caelifera",
    "odonata",
    "hemiptera",
    "homoptera",
    "heteroptera",
    "cicadidae",
    "blattodea",
    "mantodea",
    "crustacea",
    "decapoda",
    "arachnida",
    "mollusca",
    "cephalopoda",
    "chordata",
    "vertebrata",
    "actinopterygii",
    "teleostei",
    "amphibia",
    "anura",
    "reptilia",
    "squamata",
    "serpentes",
    "aves",
    "passeriformes",
    "trochilidae",
    "mammalia",
    "chiroptera",
    "rodentia",
    "primates",
    "cetacea",
    "carnivora",
    "natantia",
    "reptantia",
    "apis",
    "bombus",
    "manduca",
    "musca",
    "anopheles",
    "aedes",
    "forcipomyia",
    "lethocerus",
    "crotalus",
    "opsanus",
    "homo",
    "mus",
    "rattus",
    "oscillaria",
    "oscillatoria",
    "simulium",
    "tettigonia",
    "gryllus",
    "locusta",
    "schistocerca",
}


def test_no_demo_name_is_a_real_group_name():
    names = set()
    for r in _taxa():
        genus, epithet = r["taxon"].split()
        names |= {genus.lower(), r["clade"].lower(), r["genus"].lower()}
    assert names.isdisjoint(REAL_GROUP_NAMES), names & REAL_GROUP_NAMES


def test_demo_has_gaps_like_a_real_compilation():
    """Kinetic rates and moduli are reported for fewer taxa than masses and frequencies,
    and unevenly among clades; every taxon still appears in the per-taxon table."""
    import comparo

    tab = comparo.tabulate(comparo.load(DEMO))
    have = tab.notna()
    assert len(tab) == demo_taxa()
    for q in ("attach_rate", "transverse_modulus", "lattice_spacing_d10"):
        assert have[q].sum() < have["frequency_observed"].sum() <= have["body_mass"].sum() + 1
    by_clade = have.groupby(tab["clade"])["attach_rate"].mean()
    assert by_clade.max() - by_clade.min() >= 0.3
    assert not have[["body_mass", "frequency_observed"]].all(axis=None)


def test_pgls_on_the_demo_recovers_the_generating_exponent_and_lambda():
    """The generator (demo_tables/generate.py) draws log10 frequency = log10 30 - 0.2 log10 M
    plus a residual that is Brownian along the tree (tip sd 0.10) plus independent noise
    (sd 0.05): on its ultrametric tree, Pagel's lambda of the residual is 0.10²/(0.10² + 0.05²)
    = 0.8 (before measurement noise, which lowers it a little). The lambda-ML PGLS 95% CIs
    cover both the exponent -0.2 and lambda 0.8, and lambda = 0 is rejected (the signal is real)."""
    proc = run_cli(
        "fit",
        str(DEMO),
        "--x",
        "body_mass",
        "--y",
        "frequency_observed",
        "--method",
        "pgls",
        "--format",
        "json",
    )
    assert proc.returncode == 0, proc.stderr
    got = json.loads(proc.stdout)
    lo, hi = got["slope_ci"]
    assert lo < -0.2 < hi
    lam_lo, lam_hi = got["lambda_ci"]
    assert lam_lo < 0.10**2 / (0.10**2 + 0.05**2) < lam_hi
    assert lam_lo > 0.0


# ------------------------------------------------------------- the invented traces


def test_demo_traces_recover_their_generating_loops():
    """The demo's traces (demo_tables/generate.py, make_traces) are invented sinusoids: strain
    loops of axial amplitude 3% opened by a quarter-cycle radial part of 0.2% (counter-clockwise)
    and 0.5% (clockwise) around the isochoric curve, which encloses no area, so the signed areas
    are +pi 0.03 0.002 and -pi 0.03 0.005; work loops with force lagging length by the phase
    in their notes. Independent route for the work: a least-squares sinusoid fitted here to
    the raw file at comparo's frequency gives the amplitudes and the lag, and W = pi dL dF
    sin(phi)."""
    import math
    import re

    import numpy as np

    from comparo import cycles, load
    from comparo.base import units

    res = {r.trace_id: r for r in cycles(load(DEMO)).results}
    assert res["SC1"].values["loop_area"][0] == pytest.approx(math.pi * 0.03 * 0.002, rel=0.01)
    assert res["SC2"].values["loop_area"][0] == pytest.approx(-math.pi * 0.03 * 0.005, rel=0.01)
    with open(DEMO / "traces.csv", newline="", encoding="utf-8") as fh:
        index = {r["trace_id"]: r for r in csv.DictReader(fh)}
    for tid in ("WL1", "WL2", "WL3"):
        row = index[tid]
        phi_true = float(re.search(r"phase lag ([0-9.]+) rad", row["notes"]).group(1))
        data = np.genfromtxt(DEMO / row["file"], delimiter=",", names=True)
        t = data[row["time_column"]] * units.conversion_factor(row["time_unit"], "s")
        length = data[row["x_column"]] * units.conversion_factor(row["x_unit"], "m")
        force = data[row["y_column"]] * units.conversion_factor(row["y_unit"], "N")
        w = 2 * math.pi * res[tid].values["frequency"][0] * t
        design = np.column_stack([np.ones_like(t), t, np.sin(w), np.cos(w)])
        (_, _, ls, lc), *_ = np.linalg.lstsq(design, length, rcond=None)
        (_, _, fs, fc), *_ = np.linalg.lstsq(design, force, rcond=None)
        lag = (math.atan2(lc, ls) - math.atan2(fc, fs)) % (2 * math.pi)
        assert lag == pytest.approx(phi_true, abs=0.02)
        expected = math.pi * math.hypot(ls, lc) * math.hypot(fs, fc) * math.sin(lag)
        assert res[tid].values["net_work"][0] == pytest.approx(expected, rel=0.01)
        assert res[tid].values["net_work"][0] > 0  # force lags length: the muscle delivers work
