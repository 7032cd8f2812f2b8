"""Invisible characters inside names, units, keys and ids.

A zero-width space (U+200B), zero-width non-joiner and joiner (U+200C/D), left-to-right
and right-to-left marks (U+200E/F), a word joiner (U+2060), a byte-order mark inside text
(U+FEFF) or a no-break space (U+00A0) show as nothing or as a plain space, so a name
holding one looks like the name without it (character names from the Unicode Character
Database, via Python's unicodedata). comparo reads such a name as it looks and names the
cell in a warning; the taxon is one taxon, in a dataset folder and through import. The
cases are our own."""

from __future__ import annotations

import pytest
from hostile_tools import changed_outside, snapshot
from support import run_main, write_dataset

INVISIBLE = {
    "zwsp": "\u200b",
    "zwnj": "\u200c",
    "zwj": "\u200d",
    "lrm": "\u200e",
    "rlm": "\u200f",
    "word-joiner": "\u2060",
    "bom": "\ufeff",
    "soft-hyphen": "\u00ad",
}


def _rows(
    name: str, unit: str = "mg", quantity: str = "body_mass", source: str = "s1"
) -> list[str]:
    return [
        "o1,Apis mellifera,body_mass,100,mg,,,,s1,Table 1,reported,,,",
        f"o2,{name},fiber_radius,12,um,1,sd,10,{source},Table 2,reported,,,",
        f"o3,Apis mellifera,{quantity},120,{unit},,,,s1,p. 4,reported,,,",
        "o4,Bombus terrestris,body_mass,0.2,g,,,,s2,Table 1,reported,,,",
    ]


@pytest.mark.parametrize("kind", sorted(INVISIBLE))
@pytest.mark.parametrize("where", ["inside", "end"])
def test_an_invisible_character_does_not_make_a_second_taxon(tmp_path, kind, where):
    ch = INVISIBLE[kind]
    name = f"Apis{ch} mellifera" if where == "inside" else f"Apis mellifera{ch}"
    ds = write_dataset(tmp_path / "DS", _rows(name))
    before = snapshot(tmp_path)
    proc = run_main("table", str(ds), "-o", str(tmp_path / "t.csv"))
    assert proc.returncode == 0, proc.stderr
    assert changed_outside(before, snapshot(tmp_path), ("t.csv", "t.units.csv")) == []
    lines = (tmp_path / "t.csv").read_text(encoding="utf-8").splitlines()
    assert [ln.split(",")[0] for ln in lines[1:]] == ["Apis mellifera", "Bombus terrestris"]
    proc = run_main("check", str(ds), "--format", "csv")
    assert proc.returncode == 0, proc.stderr
    assert (
        "warning,observations.csv,3,taxon," in proc.stdout
        and ",invisible-character," in proc.stdout
    )
    assert f"U+{ord(ch):04X}" in proc.stdout and "read as 'Apis mellifera'" in proc.stdout


@pytest.mark.parametrize("space", ["\u00a0", "\u202f", "\u2009", "\u3000"])
def test_a_no_break_or_other_space_is_a_plain_space(tmp_path, space):
    ds = write_dataset(tmp_path / "DS", _rows(f"Apis{space}mellifera"))
    before = snapshot(tmp_path)
    proc = run_main("check", str(ds), "--format", "csv")
    assert proc.returncode == 0, proc.stderr
    assert "invisible-character" in proc.stdout and "read as 'Apis mellifera'" in proc.stdout
    proc = run_main("audit", str(ds), "--format", "json")
    import json

    assert proc.returncode == 0
    assert sorted(json.loads(proc.stdout)["coverage"]) == ["Apis mellifera", "Bombus terrestris"]
    assert snapshot(tmp_path) == before


def test_units_keys_and_ids_are_read_as_they_look(tmp_path):
    ds = write_dataset(
        tmp_path / "DS",
        _rows("Apis mellifera", unit="1/\u200bs", quantity="attach\u200d_rate", source="s1\u2060"),
    )
    before = snapshot(tmp_path)
    proc = run_main("check", str(ds), "--format", "csv")
    assert proc.returncode == 0, proc.stdout + proc.stderr
    for row, column in ((4, "unit"), (4, "quantity"), (3, "source_id")):
        assert f"warning,observations.csv,{row},{column}," in proc.stdout
    assert (
        "read as '1/s'" in proc.stdout
        and "read as 'attach_rate'" in proc.stdout
        and "read as 's1'" in proc.stdout
    )
    assert snapshot(tmp_path) == before


def test_free_text_keeps_its_characters(tmp_path):
    """Notes are not names: a joiner in text (as Indic scripts use it) is kept."""
    rows = _rows("Apis mellifera")
    header = (
        "obs_id,taxon,quantity,value,unit,uncertainty,uncertainty_kind,n,source_id,locator,"
        "basis,inputs,proxy_taxon,temperature_c,notes"
    )
    rows = [r + ("," + "\u0915\u094d\u200d\u0937" if i == 0 else ",") for i, r in enumerate(rows)]
    ds = write_dataset(tmp_path / "DS", rows, header=header)
    from comparo.validation.dataset import load

    assert load(ds).observations["notes"].iloc[0] == "\u0915\u094d\u200d\u0937"


def test_import_reads_names_as_they_look_and_names_the_wide_cells(tmp_path):
    wide = tmp_path / "w.csv"
    wide.write_text(
        "Species,Body mass (g),Source\nApis mellifera,0.1,s1\nApis\u00a0mellifera,0.2,s1\u200b\n"
        "\u200fBombus terrestris,0.3,s1\n",
        encoding="utf-8",
    )
    before = snapshot(tmp_path)
    proc = run_main("import", str(wide), "-o", str(tmp_path / "I"))
    assert proc.returncode == 0, proc.stderr
    assert changed_outside(before, snapshot(tmp_path), ("I",)) == []
    for cell in (
        "cell A3: 'Apis\\xa0mellifera' holds U+00A0 NO-BREAK SPACE",
        "cell C3: 's1\\u200b' holds U+200B",
        "cell A4: '\\u200fBombus terrestris' holds U+200F RIGHT-TO-LEFT MARK",
    ):
        assert cell in proc.stderr
    assert "2 taxa, 1 source(s)" in proc.stdout
    text = (tmp_path / "I" / "observations.csv").read_text(encoding="utf-8")
    assert "\u00a0" not in text and "\u200b" not in text and "\u200f" not in text
    proc = run_main("check", str(tmp_path / "I"), "--format", "csv")
    assert proc.returncode == 0 and "invisible-character" not in proc.stdout


def test_a_tree_tip_with_an_invisible_character_still_matches_its_taxon(tmp_path):
    """PGLS keeps all four taxa; check names the tip. (Three taxa would be left if the tip
    with a zero-width space stayed unmatched.)"""
    rows = [
        f"m{i},{t},body_mass,{m},mg,,,,s1,T1,reported,,,"
        for i, (t, m) in enumerate(
            [
                ("Apis mellifera", 100),
                ("Bombus terrestris", 200),
                ("Vespa crabro", 500),
                ("Musca domestica", 12),
            ]
        )
    ]
    rows += [
        f"f{i},{t},frequency_observed,{f},Hz,,,,s1,T1,reported,,,25"
        for i, (t, f) in enumerate(
            [
                ("Apis mellifera", 230),
                ("Bombus terrestris", 180),
                ("Vespa crabro", 100),
                ("Musca domestica", 190),
            ]
        )
    ]
    ds = write_dataset(tmp_path / "DS", rows)
    (ds / "tree.nwk").write_text(
        (
            "((Apis_mellifera\u200b:1,Bombus\u200e_terrestris:1):1,(Vespa_crabro:1,"
            "Musca_domestica:1):1);"
        ),
        encoding="utf-8",
    )
    before = snapshot(tmp_path)
    proc = run_main("check", str(ds), "--format", "csv")
    assert proc.returncode == 0, proc.stderr
    assert "taxon-without-tip" not in proc.stdout
    assert (
        "tip label(s) 'Apis_mellifera\\u200b', 'Bombus\\u200e_terrestris' hold U+200B ZERO WIDTH "
        "SPACE, "
        "U+200E LEFT-TO-RIGHT MARK" in proc.stdout
    )
    proc = run_main(
        "fit",
        str(ds),
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
    import json

    assert json.loads(proc.stdout)["n"] == 4
    assert snapshot(tmp_path) == before
