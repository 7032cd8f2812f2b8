"""Hostile imports into existing folders: ``comparo import --overwrite`` removes only the
tables an earlier import recorded in its import.toml, never an input and never a table no
import wrote; the suggested map file never replaces an existing (perhaps hand-edited) one.
The promise is the one of docs/data-format.md (import); the cases are our own."""

from __future__ import annotations

import tomllib

import pytest
from hostile_tools import changed_outside, snapshot
from support import run_main, write_dataset

WIDE = "Species,Body mass (g),Source\nApis mellifera,0.1,s1\nBombus terrestris,0.2,s1\n"
WIDE_TAXA = (
    "Species,Clade,Body mass (g),Source\nApis mellifera,bees,0.1,s1\nBombus terrestris,"
    "bees,0.2,s1\n"
)
UNCLEAR = "Species,Length (mm),Source\nApis mellifera,1.5,s1\n"  # fiber or sarcomere length?


def imp(*argv):
    return run_main("import", *map(str, argv))


@pytest.mark.parametrize("name", ["observations.csv", "taxa.csv", "sources.csv"])
def test_overwrite_onto_the_folder_holding_the_wide_sheet_refuses(tmp_path, name):
    """The wide sheet is itself a table of the output folder: neither replaced nor removed."""
    out = tmp_path / "out"
    out.mkdir()
    wide = out / name
    wide.write_text(WIDE, encoding="utf-8")
    (out / "import.toml").write_text(
        '[input]\nfile = "x.csv"\n[output]\nfiles = ["observations.csv", '
        '"sources.csv", "taxa.csv", "import.toml"]\n',
        encoding="utf-8",
    )
    before = snapshot(tmp_path)
    proc = imp(wide, "-o", out, "--overwrite")
    assert proc.returncode == 2, proc.stderr
    assert (
        f"is the input file {wide}" in proc.stderr and "never overwrites its inputs" in proc.stderr
    )
    assert changed_outside(before, snapshot(tmp_path)) == []


def test_overwrite_onto_a_dataset_that_was_never_an_import_keeps_its_taxa(tmp_path):
    """No import.toml: nothing is removed; the taxa table it keeps is named in a warning."""
    ds = write_dataset(tmp_path / "DS")
    (ds / "taxa.csv").write_text("taxon,clade\nApis mellifera,bees\n", encoding="utf-8")
    (tmp_path / "wide.csv").write_text(WIDE, encoding="utf-8")
    before = snapshot(tmp_path)
    proc = imp(tmp_path / "wide.csv", "-o", ds, "--overwrite")
    assert proc.returncode == 0, proc.stderr
    assert (ds / "taxa.csv").read_text(encoding="utf-8") == "taxon,clade\nApis mellifera,bees\n"
    assert (
        "table-kept" in proc.stderr
        and "taxa.csv was not written by an earlier comparo import" in proc.stderr
    )
    written = {"DS/observations.csv", "DS/sources.csv", "DS/import.toml"}
    assert changed_outside(before, snapshot(tmp_path), tuple(written)) == []


def test_overwrite_refuses_a_table_no_import_wrote_beside_a_new_one(tmp_path):
    """observations.tsv of the user would stand beside the new observations.csv: refused."""
    ds = tmp_path / "DS"
    ds.mkdir()
    (ds / "observations.tsv").write_text("obs_id\tvalue\n", encoding="utf-8")
    (tmp_path / "wide.csv").write_text(WIDE, encoding="utf-8")
    before = snapshot(tmp_path)
    proc = imp(tmp_path / "wide.csv", "-o", ds, "--overwrite")
    assert proc.returncode == 2
    assert "holds observations.tsv, which no comparo import wrote" in proc.stderr
    assert changed_outside(before, snapshot(tmp_path)) == []


def test_overwrite_removes_only_what_the_earlier_import_recorded(tmp_path):
    """A second import without grouping columns removes the first import's taxa.csv (listed in
    its import.toml) and keeps the user's own files."""
    (tmp_path / "w1.csv").write_text(WIDE_TAXA, encoding="utf-8")
    (tmp_path / "w2.csv").write_text(WIDE, encoding="utf-8")
    out = tmp_path / "out"
    assert imp(tmp_path / "w1.csv", "-o", out).returncode == 0
    recorded = tomllib.loads((out / "import.toml").read_text(encoding="utf-8"))["output"]["files"]
    assert sorted(recorded) == ["import.toml", "observations.csv", "sources.csv", "taxa.csv"]
    (out / "notes.txt").write_text("mine", encoding="utf-8")
    (out / "tree.nwk").write_text("(Apis_mellifera:1,Bombus_terrestris:1);", encoding="utf-8")
    before = snapshot(tmp_path)
    proc = imp(tmp_path / "w2.csv", "-o", out, "--overwrite")
    assert proc.returncode == 0, proc.stderr
    assert not (out / "taxa.csv").exists()
    assert (out / "notes.txt").read_text(encoding="utf-8") == "mine" and (
        out / "tree.nwk"
    ).is_file()
    allowed = ("out/observations.csv", "out/sources.csv", "out/import.toml", "out/taxa.csv")
    assert changed_outside(before, snapshot(tmp_path), allowed) == []


def test_an_import_toml_of_an_earlier_version_is_read_for_its_tables(tmp_path):
    """Without [output] files, the tables are inferred: observations.csv, the sources table,
    taxa.csv only when a column had the taxa role."""
    out = tmp_path / "out"
    out.mkdir()
    (out / "taxa.csv").write_text("taxon,clade\nApis mellifera,bees\n", encoding="utf-8")
    (out / "import.toml").write_text(
        '[input]\nfile = "w.csv"\nsources = ""\n[[columns]]\nheader = "Species"\nrole = "taxon"\n',
        encoding="utf-8",
    )
    (tmp_path / "w.csv").write_text(WIDE, encoding="utf-8")
    proc = imp(tmp_path / "w.csv", "-o", out, "--overwrite")
    assert proc.returncode == 0, proc.stderr
    assert (out / "taxa.csv").is_file() and "table-kept" in proc.stderr


def test_the_suggested_map_never_replaces_an_edited_one(tmp_path):
    (tmp_path / "w.csv").write_text(UNCLEAR, encoding="utf-8")
    out = tmp_path / "out"
    edited = tmp_path / "out-import-map.csv"
    edited.write_text(
        "header,role,key,unit,basis\nSpecies,taxon,,,\n# my notes\n", encoding="utf-8"
    )
    before = snapshot(tmp_path)
    proc = imp(tmp_path / "w.csv", "-o", out)
    assert proc.returncode == 2
    second = tmp_path / "out-import-map-2.csv"
    assert f"written to {second} ({edited} exists and is kept as it is)" in proc.stderr
    assert changed_outside(before, snapshot(tmp_path), ("out-import-map-2.csv",)) == []
    # the same decisions again: the file already there is named, nothing new is written
    before = snapshot(tmp_path)
    proc = imp(tmp_path / "w.csv", "-o", out)
    assert proc.returncode == 2
    assert f"the map file {second} already holds every column's decision" in proc.stderr
    assert changed_outside(before, snapshot(tmp_path)) == []


def test_the_map_given_with_map_is_not_replaced_either(tmp_path):
    """Rerun with --map on the suggested file while a header still needs a decision."""
    (tmp_path / "w.csv").write_text(UNCLEAR, encoding="utf-8")
    out = tmp_path / "out"
    assert imp(tmp_path / "w.csv", "-o", out).returncode == 2
    mp = tmp_path / "out-import-map.csv"
    mp.write_text(mp.read_text(encoding="utf-8") + "Extra,ignore,,,\n", encoding="utf-8")
    before = snapshot(tmp_path)
    proc = imp(tmp_path / "w.csv", "-o", out, "--map", mp)
    assert proc.returncode == 2
    assert changed_outside(before, snapshot(tmp_path), ("out-import-map-2.csv",)) == []
