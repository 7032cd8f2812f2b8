"""``comparo diff`` and :func:`comparo.diff`: two versions of a small compilation with known edits.

The compilation below is test input written for these tests (invented numbers, not the demo);
every expected list is the set of edits made by :func:`_new_version`, and the slopes are checked
against independent routes (the same fit called directly on each version, statsmodels OLS)."""

from __future__ import annotations

import json
import math
import shutil
from pathlib import Path

import numpy as np
import pytest
from support import run_main

import comparo

HEADER = (
    "obs_id,taxon,quantity,value,unit,uncertainty,uncertainty_kind,n,"
    "source_id,locator,basis,temperature_c"
)
ROWS = [
    "o1,Apis mellifera,body_mass,100,mg,,,,s1,Table 1,reported,",
    "o2,Apis mellifera,frequency_observed,230,Hz,6,se,,s1,Table 2,reported,25",
    "o3,Musca domestica,frequency_observed,190,Hz,5,se,,s2,Fig. 3,digitized,25",
    "o4,Musca domestica,body_mass,20,mg,,,,s2,Table 1,reported,",
    "o5,Bombus terrestris,body_mass,200,mg,,,,s2,Table 1,reported,",
    "o6,Bombus terrestris,frequency_observed,150,Hz,4,se,,s2,Table 2,reported,25",
    "o7,Vespula vulgaris,body_mass,90,mg,,,,s1,Table 1,reported,",
    "o8,Vespula vulgaris,frequency_observed,160,Hz,5,se,,s1,Table 2,reported,25",
    "o9,Delia radicum,body_mass,1,mg,,,,s3,p. 4,reported,",
    "o10,Delia radicum,frequency_observed,220,Hz,8,se,,s3,p. 4,reported,25",
    "o11,Tipula paludosa,body_mass,60,mg,,,,s3,p. 5,reported,",
    "o12,Tipula paludosa,frequency_observed,55,Hz,3,se,,s3,p. 5,reported,25",
    "o13,Apis mellifera,fiber_radius,12,um,,,,s1,Table 3,reported,",
    "o14,Apis mellifera,frequency_observed,240,Hz,6,se,,s2,Fig. 1,digitized,25",
]
SOURCES = (
    "source_id,citation,year,doi\n"
    "s1,Test source one (2001),2001,10.1000/one\n"
    "s2,Test source two (2002),2002,\n"
    "s3,Test source three (2003),2003,\n"
)
TAXA = (
    "taxon,accepted_name,clade\n"
    "Apis mellifera,,Hymenoptera\nBombus terrestris,,Hymenoptera\nVespula vulgaris,,Hymenoptera\n"
    "Musca domestica,,Diptera\nDelia radicum,,Diptera\nTipula paludosa,,Diptera\n"
)
TREE = (
    "(((Apis_mellifera:1,Bombus_terrestris:1):1,Vespula_vulgaris:2):2,"
    "((Musca_domestica:1,Delia_radicum:1):1,Tipula_paludosa:2):2);\n"
)
SETTINGS = (
    'reference_temperature_c = 25.0\n\n[[analysis]]\nx = "body_mass"\ny = "frequency_observed"\n'
    'method = "ols"\nagainst = -0.1\n'
)


def _write(
    folder: Path, rows=ROWS, sources=SOURCES, taxa=TAXA, tree=TREE, settings=SETTINGS
) -> Path:
    folder.mkdir(parents=True)
    (folder / "observations.csv").write_text(
        HEADER + "\n" + "\n".join(rows) + "\n", encoding="utf-8"
    )
    (folder / "sources.csv").write_text(sources, encoding="utf-8")
    (folder / "taxa.csv").write_text(taxa, encoding="utf-8")
    (folder / "tree.nwk").write_text(tree, encoding="utf-8")
    (folder / "comparo.toml").write_text(settings, encoding="utf-8")
    return folder


def _new_version(folder: Path) -> Path:
    """The old version with one edit of each kind."""
    rows = list(ROWS)
    rows[2] = rows[2].replace(",190,", ",200,")  # o3: value changed
    rows[12] = "o13,Apis mellifera,fiber_radius,0.012,mm,,,,s1,Table 3,reported,"  # unit only
    rows[4] = rows[4].replace("o5,", "o5b,")  # id changed, same content
    del rows[13]  # o14 removed
    rows.append("o20,Bombus terrestris,fiber_radius,10,um,,,,s2,Table 3,reported,")  # added
    sources = SOURCES.replace(
        "s2,Test source two (2002),2002,", "s2,Test source two (2002),2002,10.1000/two"
    )
    taxa = TAXA.replace(
        "Vespula vulgaris,,Hymenoptera",
        "Vespula vulgaris,Paravespula vulgaris,Hymenoptera\nParavespula vulgaris,,Hymenoptera",
    ).replace("Tipula paludosa,,Diptera", "Tipula paludosa,,Nematocera")
    tree = TREE.replace("Vespula_vulgaris", "Paravespula_vulgaris")
    return _write(folder, rows, sources, taxa, tree)


@pytest.fixture(scope="module")
def versions(tmp_path_factory) -> tuple[Path, Path]:
    base = tmp_path_factory.mktemp("versions")
    return _write(base / "old"), _new_version(base / "new")


@pytest.fixture(scope="module")
def result(versions):
    return comparo.diff(*versions)


def test_rows_added_removed_and_changed_are_listed_exactly(result):
    """Each edit of _new_version appears once, in the new file's order; the unit-only change
    (12 um -> 0.012 mm, the same length: 1 mm = 1000 um, SI definition) is not a value change."""
    assert result.rows == {
        "added": ["o20"],
        "removed": ["o14"],
        "changed": [
            {"obs_id": "o3", "column": "value", "old": 190.0, "new": 200.0, "kind": "changed"},
            {"obs_id": "o5b", "column": "obs_id", "old": "o5", "new": "o5b", "kind": "id_changed"},
            {"obs_id": "o13", "column": "value", "old": 12.0, "new": 0.012, "kind": "unit_only"},
            {"obs_id": "o13", "column": "unit", "old": "um", "new": "mm", "kind": "unit_only"},
        ],
    }


def test_sources_names_groups_and_tree(result):
    assert result.sources == {
        "added": [],
        "removed": [],
        "changed": [{"source_id": "s2", "column": "doi", "old": None, "new": "10.1000/two"}],
    }
    assert result.names == {
        "added": [],
        "removed": [],
        "renamed": [{"old": "Vespula vulgaris", "new": "Paravespula vulgaris"}],
        "regrouped": [
            {"taxon": "Tipula paludosa", "column": "clade", "old": "Diptera", "new": "Nematocera"}
        ],
    }
    assert result.tree == {
        "tips_added": ["Paravespula_vulgaris"],
        "tips_dropped": ["Vespula_vulgaris"],
        "text_changed": True,
    }
    assert result.settings_changed is False and result.regimes == ()


def test_per_taxon_values_that_moved_with_their_change_in_standard_uncertainties(result):
    """Hand computation. Apis, old: inverse-variance mean of 230 and 240 Hz (se 6 each) = 235 Hz,
    u = 6/sqrt(2) times the Birge ratio sqrt(chi2/(k-1)) (Birge 1932; docs/methods) with
    chi2 = 2 (5/6)^2, i.e. u = 5 Hz; new: 230 +- 6 Hz, so (230 - 235)/sqrt(5^2 + 6^2).
    Musca: 190 -> 200 Hz, se 5 both: 10/sqrt(50). Bombus gains a fibre radius: no uncertainty."""
    chi2 = 2 * (5 / 6) ** 2
    u_old = 6 / math.sqrt(2) * math.sqrt(chi2 / 1)
    got = {(t["taxon"], t["quantity"]): t for t in result.taxa}
    assert set(got) == {
        ("Apis mellifera", "frequency_observed"),
        ("Musca domestica", "frequency_observed"),
        ("Bombus terrestris", "fiber_radius"),
    }
    apis = got[("Apis mellifera", "frequency_observed")]
    assert apis["old"] == pytest.approx(235.0) and apis["new"] == pytest.approx(230.0)
    assert apis["change_se"] == pytest.approx(-5 / math.hypot(u_old, 6))
    musca = got[("Musca domestica", "frequency_observed")]
    assert (musca["old"], musca["new"]) == (190.0, 200.0)
    assert musca["change_se"] == pytest.approx(10 / math.sqrt(50))
    bombus = got[("Bombus terrestris", "fiber_radius")]
    assert (bombus["old"], bombus["new"], bombus["change_se"], bombus["unit"]) == (
        None,
        10.0,
        None,
        "um",
    )


def test_analysis_slopes_agree_with_the_fit_and_with_statsmodels(versions, result):
    """Independent routes: comparo.fit called directly on each version's per-taxon table, and
    statsmodels OLS of log10 frequency on log10 mass (the per-taxon values) with its 95%
    interval."""
    import statsmodels.api as sm

    (a,) = result.analyses
    assert a["name"] == "ols_frequency_observed_vs_body_mass"
    for side, folder in zip(("old", "new"), versions, strict=True):
        table = comparo.tabulate(comparo.load(folder))
        direct = comparo.fit(table, "body_mass", "frequency_observed", "ols", against=-0.1)
        assert a[f"slope_{side}"] == pytest.approx(direct.slope, rel=1e-12)
        rows = table.dropna(subset=["body_mass", "frequency_observed"])
        X = sm.add_constant(np.log10(rows["body_mass"].to_numpy(float)))
        ols = sm.OLS(np.log10(rows["frequency_observed"].to_numpy(float)), X).fit()
        assert a[f"slope_{side}"] == pytest.approx(ols.params[1], rel=1e-9)
        assert a[f"ci_{side}"] == pytest.approx(list(ols.conf_int(0.05)[1]), rel=1e-9)
        lo, hi = ols.conf_int(0.05)[1]
        expected = "above" if lo > -0.1 else "below" if hi < -0.1 else "includes"
        assert a[f"verdict_{side}"] == expected
    half = lambda c: (c[1] - c[0]) / (2 * 1.959963984540054)  # noqa: E731  z_0.975, from memory
    assert a["shift_se"] == pytest.approx(
        (a["slope_new"] - a["slope_old"]) / math.hypot(half(a["ci_old"]), half(a["ci_new"]))
    )
    assert a["verdict_changed"] is (a["verdict_old"] != a["verdict_new"])


def test_a_verdict_that_flips_is_reported(tmp_path):
    """Delia at 1000 Hz and Tipula at 160 Hz make the OLS slope steep enough that its 95%
    interval lies below -0.1 (checked with statsmodels on the new version)."""
    import statsmodels.api as sm

    old = _write(tmp_path / "old")
    rows = [r.replace(",220,Hz,", ",1000,Hz,").replace(",55,Hz,", ",160,Hz,") for r in ROWS]
    new = _write(tmp_path / "new", rows)
    (a,) = comparo.diff(old, new).analyses
    t = comparo.tabulate(comparo.load(new)).dropna(subset=["body_mass", "frequency_observed"])
    ols = sm.OLS(
        np.log10(t["frequency_observed"].to_numpy(float)),
        sm.add_constant(np.log10(t["body_mass"].to_numpy(float))),
    ).fit()
    assert ols.conf_int(0.05)[1][1] < -0.1  # the interval now lies below the tested value
    assert (a["verdict_old"], a["verdict_new"], a["verdict_changed"]) == ("includes", "below", True)


def test_a_unit_only_edit_moves_no_value_and_no_conclusion(tmp_path):
    old = _write(tmp_path / "old")
    rows = [
        r.replace("o1,Apis mellifera,body_mass,100,mg", "o1,Apis mellifera,body_mass,0.1,g")
        for r in ROWS
    ]
    d = comparo.diff(old, _write(tmp_path / "new", rows))
    assert d.rows["changed"] == [
        {"obs_id": "o1", "column": "value", "old": 100.0, "new": 0.1, "kind": "unit_only"},
        {"obs_id": "o1", "column": "unit", "old": "mg", "new": "g", "kind": "unit_only"},
    ]
    assert d.taxa == () and not any(a["changed"] for a in d.analyses)


def test_same_version_differs_in_nothing(versions):
    d = comparo.diff(versions[0], versions[0])
    assert not d.differs and d.to_frame().empty and "no differences" in d.summary()


def test_the_result_follows_the_protocol(result):
    data = result.to_dict()
    assert json.loads(json.dumps(data, allow_nan=False)) == data
    assert data["rows"] == result.rows and data["taxa"] == [dict(t) for t in result.taxa]
    frame = result.to_frame()
    assert list(frame.columns) == ["section", "item", "column", "old", "new", "note"]
    assert frame["section"].iloc[0] == "analysis"  # conclusions first
    assert "Paravespula vulgaris" in result._repr_html_()
    text = result.summary()
    assert text.index("Conclusions") < text.index("Counts") < text.index("Details")


def test_cli_exit_codes_and_formats(versions, tmp_path):
    old, new = (str(p) for p in versions)
    same = run_main("diff", old, old)
    assert same.returncode == 0 and "no differences" in same.stdout
    js = run_main("diff", old, new, "--format", "json")
    assert js.returncode == 1
    assert json.loads(js.stdout) == json.loads(json.dumps(comparo.diff(old, new).to_dict()))
    page = tmp_path / "diff.html"
    res = run_main("diff", old, new, "--format", "html", "-o", str(page))
    assert res.returncode == 1 and res.stdout == ""
    assert page.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")


def test_cli_bad_input_exits_2_naming_the_version_and_its_problems(versions, tmp_path):
    bad = shutil.copytree(versions[1], tmp_path / "bad")
    rows = [*ROWS, "o30,Apis mellifera,body_mass,heavy,mg,,,,s1,Table 9,reported,"]
    (bad / "observations.csv").write_text(HEADER + "\n" + "\n".join(rows) + "\n", encoding="utf-8")
    res = run_main("diff", str(versions[0]), str(bad))
    assert res.returncode == 2
    assert f"NEW version {bad} has problems" in res.stderr and "heavy" in res.stderr
    assert "Traceback" not in res.stderr
    missing = run_main("diff", str(tmp_path / "nowhere"), str(versions[0]))
    assert missing.returncode == 2 and "OLD version" in missing.stderr


def test_a_regime_that_changes_is_listed(tmp_path):
    """Hand computation (docs/methods/derived.md): tau_p = l^2 eta / (k M) with l = 12 um,
    k = 10 nm^2, M = 100 kPa and a cytosol viscosity eta between 0.3 and 1 mPa s gives 0.04 to
    0.15 s; against tau_xb = 1 ms, Pi = tau_p / tau_xb is 40 to 150 (hydraulic, far beyond a 10%
    uncertainty); against 5 s it is 0.009 to 0.03 (kinetic)."""
    extra = [
        "p1,Apis mellifera,permeability,10,nm^2,1,se,,s1,Table 4,reported,",
        "p2,Apis mellifera,transverse_modulus,100,kPa,10,se,,s1,Table 4,reported,",
        "p3,Apis mellifera,kinetic_time,1,ms,0.1,se,,s1,Table 4,reported,25",
    ]
    rows = [r.replace(",12,um,,,", ",12,um,0.5,se,") for r in ROWS]
    old = _write(tmp_path / "old", [*rows, *extra])
    new = _write(
        tmp_path / "new",
        [*rows, *extra[:2], "p3,Apis mellifera,kinetic_time,5,s,0.5,se,,s1,Table 4,reported,25"],
    )
    for eta in (0.3e-3, 1e-3):
        tau_p = (12e-6) ** 2 * eta / (10e-18 * 100e3)
        assert 10 < tau_p / 1e-3 and tau_p / 5 < 0.1
    d = comparo.diff(old, new)
    assert list(d.regimes) == [{"taxon": "Apis mellifera", "old": "hydraulic", "new": "kinetic"}]
    assert "regimes changed: 1" in d.summary()


def test_a_lump_into_an_existing_taxon_is_a_rename_whose_values_stay_apart(tmp_path):
    """Bombus made a synonym of Apis: one rename; Bombus's values are gone, Apis's gain them."""
    old = _write(tmp_path / "old")
    taxa = TAXA.replace(
        "Bombus terrestris,,Hymenoptera", "Bombus terrestris,Apis mellifera,Hymenoptera"
    )
    d = comparo.diff(old, _write(tmp_path / "new", taxa=taxa))
    assert d.names["renamed"] == [{"old": "Bombus terrestris", "new": "Apis mellifera"}]
    assert d.names["added"] == [] and d.names["removed"] == []
    moved = {(t["taxon"], t["quantity"]): (t["old"], t["new"]) for t in d.taxa}
    assert moved[("Bombus terrestris", "body_mass")] == (pytest.approx(200e-6), None)
    assert ("Apis mellifera", "body_mass") in moved
