"""``comparo merge`` and :func:`comparo.merge`: two curators' copies of a small compilation.

The compilation below is test input written for these tests (invented numbers, not the demo).
Each test makes known edits on each side and checks the merged files cell by cell against the
three-way merge rule written out in docs/versions.md (the rule of text merges in version-control
systems, applied to rows and cells: common practice); the merged folder is checked with
``comparo.check`` and the inputs are hashed before and after."""

from __future__ import annotations

import csv
import hashlib
from pathlib import Path

import pytest
from support import run_main

import comparo

HEADER = "obs_id,taxon,quantity,value,unit,uncertainty,uncertainty_kind,source_id,locator,basis"
ROWS = {
    "m1": "m1,Locusta migratoria,body_mass,2000,mg,,,k1,Table 1,reported",
    "m2": "m2,Locusta migratoria,frequency_observed,20,Hz,1,se,k1,Table 2,reported",
    "m3": "m3,Schistocerca gregaria,body_mass,1800,mg,,,k1,Table 1,reported",
    "m4": "m4,Schistocerca gregaria,frequency_observed,18,Hz,1,se,k2,Fig. 2,reported",
    "m5": "m5,Manduca sexta,body_mass,1500,mg,,,k2,Table 3,reported",
    "m6": "m6,Manduca sexta,frequency_observed,25,Hz,2,se,k2,Table 4,reported",
    "m7": "m7,Manduca sexta,fiber_radius,15,um,,,k3,p. 7,reported",
}
SOURCES = {
    "k1": "k1,Merge test source one (2011),2011,",
    "k2": "k2,Merge test source two (2012),2012,",
    "k3": "k3,Merge test source three (2013),2013,",
}
TAXA = {
    "Locusta migratoria": "Locusta migratoria,,Orthoptera",
    "Schistocerca gregaria": "Schistocerca gregaria,,Orthoptera",
    "Manduca sexta": "Manduca sexta,,Lepidoptera",
}
TREE = "((Locusta_migratoria:1,Schistocerca_gregaria:1):3,Manduca_sexta:4);\n"
SETTINGS = "reference_temperature_c = 25.0\n"


def _write(folder: Path, rows=None, sources=None, taxa=None, tree=TREE, settings=SETTINGS):
    folder.mkdir(parents=True)
    rows, sources, taxa = rows or ROWS, sources or SOURCES, taxa or TAXA
    (folder / "observations.csv").write_text(HEADER + "\n" + "\n".join(rows.values()) + "\n")
    (folder / "sources.csv").write_text(
        "source_id,citation,year,doi\n" + "\n".join(sources.values()) + "\n"
    )
    (folder / "taxa.csv").write_text("taxon,accepted_name,order\n" + "\n".join(taxa.values()))
    (folder / "tree.nwk").write_text(tree)
    (folder / "comparo.toml").write_text(settings)
    return folder


def _edit(rows: dict, key: str, old: str, new: str) -> dict:
    out = dict(rows)
    assert old in out[key]
    out[key] = out[key].replace(old, new)
    return out


def _hash(*folders: Path) -> str:
    h = hashlib.sha256()
    for folder in folders:
        for p in sorted(folder.rglob("*")):
            h.update(str(p.relative_to(folder)).encode())
            h.update(p.read_bytes() if p.is_file() else b"/")
    return h.hexdigest()


def _table(path: Path, key: str) -> dict[str, dict[str, str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        return {r[key]: r for r in csv.DictReader(fh)}


def _cells(line: str, header: str = HEADER) -> dict[str, str]:
    return dict(zip(header.split(","), line.split(","), strict=True))


@pytest.fixture()
def base(tmp_path):
    return _write(tmp_path / "base")


def _merge_cli(tmp_path, a, b, base=None, out="OUT", resolve=None):
    args = [str(a), str(b), "-o", str(tmp_path / out)]
    if base is not None:
        args += ["--base", str(base)]
    if resolve is not None:
        args += ["--resolve", str(resolve)]
    before = _hash(*[p for p in (a, b, base) if p is not None])
    res = run_main("merge", *args)
    assert _hash(*[p for p in (a, b, base) if p is not None]) == before  # inputs untouched
    return res


def test_one_sided_edits_on_each_side_are_merged_cell_by_cell(tmp_path, base):
    """Edits made on one side only are taken from that side, cell by cell (docs/versions.md)."""
    rows_a = _edit(ROWS, "m2", ",20,Hz", ",21,Hz")  # a: value of m2
    rows_a = _edit(rows_a, "m4", "Fig. 2", "Fig. 2b")  # a: locator of m4
    rows_b = _edit(ROWS, "m4", ",18,Hz,1,", ",19,Hz,1,")  # b: value of m4 (other column)
    rows_b = _edit(rows_b, "m7", ",15,um,", ",0.015,mm,")  # b: unit-only rewrite
    del rows_b["m5"]  # b: removed, unchanged on a
    rows_a["m8"] = "m8,Locusta migratoria,fiber_radius,20,um,,,k1,Table 5,reported"  # a adds
    src_b = _edit(SOURCES, "k2", ",2012,", ",2012,10.1000/two")  # b: DOI of k2
    taxa_a = _edit(TAXA, "Manduca sexta", "Lepidoptera", "Lepidoptera (moths)")
    tree_b = TREE.replace("Manduca_sexta:4", "Manduca_sexta:5")
    a = _write(tmp_path / "a", rows=rows_a, taxa=taxa_a)
    b = _write(tmp_path / "b", rows=rows_b, sources=src_b, tree=tree_b)
    res = _merge_cli(tmp_path, a, b, base)
    assert res.returncode == 0, res.stderr
    out = tmp_path / "OUT"
    got = _table(out / "observations.csv", "obs_id")
    expected = {k: _cells(v) for k, v in ROWS.items() if k != "m5"}
    expected["m2"]["value"] = "21"
    expected["m4"].update(value="19", locator="Fig. 2b")
    expected["m7"].update(value="0.015", unit="mm")
    expected["m8"] = _cells(rows_a["m8"])
    assert got == expected
    assert _table(out / "sources.csv", "source_id")["k2"]["doi"] == "10.1000/two"
    assert _table(out / "taxa.csv", "taxon")["Manduca sexta"]["order"] == "Lepidoptera (moths)"
    assert (out / "tree.nwk").read_text() == tree_b
    note = {(r["section"], r["key"]): r for r in csv.DictReader(open(out / "merge-note.csv"))}
    assert note[("observations", "m2")]["origin"] == "a"
    assert note[("observations", "m4")]["origin"] == "merged"
    assert note[("observations", "m4")]["columns"] == "value:b; locator:a"
    assert note[("observations", "m5")]["origin"] == "removed by b"
    assert note[("observations", "m1")]["origin"] == "base"
    assert note[("observations", "m8")]["origin"] == "a"
    assert note[("tree", "tree.nwk")]["origin"] == "b"
    checked = comparo.check(out)
    assert not (checked.problems["severity"] == "error").any()


def test_both_sided_conflict_is_listed_and_resolved_round_trip(tmp_path, base):
    """A cell changed differently on both sides is a conflict: exit 2, OUT not written, the
    conflicts file beside OUT lists base, a and b; its 'take' column resolves it."""
    a = _write(tmp_path / "a", rows=_edit(ROWS, "m2", ",20,Hz", ",21,Hz"))
    b = _write(tmp_path / "b", rows=_edit(ROWS, "m2", ",20,Hz", ",22,Hz"))
    res = _merge_cli(tmp_path, a, b, base)
    assert res.returncode == 2
    assert not (tmp_path / "OUT").exists()
    assert "m2 value" in res.stderr
    conflicts_file = tmp_path / "OUT.conflicts.csv"
    rows = list(csv.DictReader(open(conflicts_file)))
    assert rows == [
        {
            "section": "observations",
            "key": "m2",
            "column": "value",
            "base": "20",
            "a": "21",
            "b": "22",
            "take": "",
        }
    ]
    for take, value in (("b", "22"), ("21.5", "21.5")):
        rows[0]["take"] = take
        resolved = tmp_path / f"resolved-{take}.csv"
        with open(resolved, "w", newline="") as fh:
            w = csv.DictWriter(fh, fieldnames=list(rows[0]))
            w.writeheader()
            w.writerows(rows)
        res = _merge_cli(tmp_path, a, b, base, out=f"OUT-{take}", resolve=resolved)
        assert res.returncode == 0, res.stderr
        assert (
            _table(tmp_path / f"OUT-{take}" / "observations.csv", "obs_id")["m2"]["value"] == value
        )
        note = _table(tmp_path / f"OUT-{take}" / "merge-note.csv", "key")
        assert note["m2"]["origin"] == "resolved"


def test_additions_on_both_sides(tmp_path, base):
    """The same row added on both sides is one row; the same obs_id added with different
    content is a conflict on the differing cell only."""
    new = "m9,Manduca sexta,body_mass,1510,mg,,,k3,Table 9,reported"
    same_a = _write(tmp_path / "a", rows={**ROWS, "m9": new})
    same_b = _write(tmp_path / "b", rows={**ROWS, "m9": new})
    res = _merge_cli(tmp_path, same_a, same_b, base)
    assert res.returncode == 0, res.stderr
    got = _table(tmp_path / "OUT" / "observations.csv", "obs_id")
    assert list(got) == [*ROWS, "m9"]
    assert _table(tmp_path / "OUT" / "merge-note.csv", "key")["m9"]["origin"] == "a and b"
    diff_b = _write(tmp_path / "b2", rows={**ROWS, "m9": new.replace("1510", "1520")})
    res = _merge_cli(tmp_path, same_a, diff_b, base, out="OUT2")
    assert res.returncode == 2
    rows = list(csv.DictReader(open(tmp_path / "OUT2.conflicts.csv")))
    assert [(r["key"], r["column"], r["base"], r["a"], r["b"]) for r in rows] == [
        ("m9", "value", "(absent)", "1510", "1520")
    ]


def test_removal_against_edit_is_a_conflict(tmp_path, base):
    """Removed on one side and changed on the other: a row conflict; 'take' chooses a side."""
    rows_a = dict(ROWS)
    del rows_a["m3"]
    a = _write(tmp_path / "a", rows=rows_a)
    b = _write(tmp_path / "b", rows=_edit(ROWS, "m3", "1800", "1850"))
    res = _merge_cli(tmp_path, a, b, base)
    assert res.returncode == 2
    path = tmp_path / "OUT.conflicts.csv"
    rows = list(csv.DictReader(open(path)))
    assert [(r["key"], r["column"], r["a"]) for r in rows] == [("m3", "", "(absent)")]
    assert "value=1850" in rows[0]["b"] and "value=1800" in rows[0]["base"]
    rows[0]["take"] = "a"
    with open(path, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    res = _merge_cli(tmp_path, a, b, base, resolve=path)
    assert res.returncode == 0, res.stderr
    assert "m3" not in _table(tmp_path / "OUT" / "observations.csv", "obs_id")


def test_unit_rewrite_against_value_edit_conflicts_on_value_and_unit(tmp_path, base):
    """value, unit and uncertainty are one group: a unit rewrite on one side and a new value on
    the other are not mixed into a value in the wrong unit."""
    a = _write(tmp_path / "a", rows=_edit(ROWS, "m7", ",15,um,", ",0.015,mm,"))
    b = _write(tmp_path / "b", rows=_edit(ROWS, "m7", ",15,um,", ",16,um,"))
    res = _merge_cli(tmp_path, a, b, base)
    assert res.returncode == 2
    rows = list(csv.DictReader(open(tmp_path / "OUT.conflicts.csv")))
    assert [(r["column"], r["a"], r["b"]) for r in rows] == [
        ("value", "0.015", "16"),
        ("unit", "mm", "um"),
    ]


def test_id_changed_on_one_side_follows_the_row(tmp_path, base):
    """A row whose obs_id one side changed (same content, as comparo diff matches it) keeps the
    new id and takes the other side's edit of another cell."""
    a = _write(
        tmp_path / "a",
        rows={
            ("m3b" if k == "m3" else k): (v.replace("m3,", "m3b,") if k == "m3" else v)
            for k, v in ROWS.items()
        },
    )
    b = _write(tmp_path / "b", rows=_edit(ROWS, "m3", "Table 1", "Table 1 (row 3)"))
    res = _merge_cli(tmp_path, a, b, base)
    assert res.returncode == 0, res.stderr
    got = _table(tmp_path / "OUT" / "observations.csv", "obs_id")
    assert "m3" not in got
    assert got["m3b"]["locator"] == "Table 1 (row 3)"


def test_without_base_every_difference_is_a_conflict(tmp_path):
    """Without a base, rows the same in A and B are kept, any differing row is a conflict."""
    a = _write(tmp_path / "a", rows=_edit(ROWS, "m1", "2000", "2100"))
    rows_b = dict(ROWS)
    rows_b["m9"] = "m9,Manduca sexta,body_mass,1510,mg,,,k3,Table 9,reported"
    b = _write(tmp_path / "b", rows=rows_b)
    res = _merge_cli(tmp_path, a, b)
    assert res.returncode == 2
    rows = list(csv.DictReader(open(tmp_path / "OUT.conflicts.csv")))
    assert [(r["key"], r["column"], r["base"]) for r in rows] == [
        ("m1", "value", "(no base)"),
        ("m9", "", "(no base)"),
    ]
    same = _write(tmp_path / "same", rows=dict(ROWS))
    res = _merge_cli(tmp_path, same, _write(tmp_path / "same2"), out="OUT2")
    assert res.returncode == 0, res.stderr
    assert list(_table(tmp_path / "OUT2" / "observations.csv", "obs_id")) == list(ROWS)


def test_python_api_answers_as_the_cli(tmp_path, base):
    """comparo.merge returns the result the command prints (exit code, conflicts, note)."""
    a = _write(tmp_path / "a", rows=_edit(ROWS, "m2", ",20,Hz", ",21,Hz"))
    b = _write(tmp_path / "b", rows=_edit(ROWS, "m2", ",20,Hz", ",22,Hz"))
    r = comparo.merge(a, b, base=base, out=tmp_path / "OUT")
    assert r.exit_code == 2 and r.out is None
    assert Path(r.conflicts_file) == tmp_path / "OUT.conflicts.csv"
    assert [c["key"] for c in r.unresolved] == ["m2"]
    assert r.to_dict()["unresolved"] == 1


def test_refusals_and_no_overwrite(tmp_path, base):
    """OUT inside an input, or an existing non-empty OUT, is refused (exit 2); a file already
    at the conflicts file's name is never overwritten."""
    a = _write(tmp_path / "a", rows=_edit(ROWS, "m2", ",20,Hz", ",21,Hz"))
    b = _write(tmp_path / "b", rows=_edit(ROWS, "m2", ",20,Hz", ",22,Hz"))
    res = run_main("merge", str(a), str(b), "--base", str(base), "-o", str(a / "merged"))
    assert res.returncode == 2 and "inside the input" in res.stderr
    full = tmp_path / "full"
    full.mkdir()
    (full / "keep.txt").write_text("mine")
    res = run_main("merge", str(a), str(b), "--base", str(base), "-o", str(full))
    assert res.returncode == 2 and "not empty" in res.stderr
    assert (full / "keep.txt").read_text() == "mine"
    (tmp_path / "OUT.conflicts.csv").write_text("user data\n")
    res = _merge_cli(tmp_path, a, b, base)
    assert res.returncode == 2
    assert (tmp_path / "OUT.conflicts.csv").read_text() == "user data\n"
    assert (tmp_path / "OUT.conflicts-2.csv").exists()


def test_second_round_keeps_given_takes_and_refuses_a_bad_take(tmp_path, base):
    """With some takes given and some blank, the new conflicts file (never the one passed back)
    lists all conflicts with the given takes filled in; a hand value for a whole row is
    refused with exit 2."""
    rows_a = _edit(_edit(ROWS, "m2", ",20,Hz", ",21,Hz"), "m4", "Fig. 2", "Fig. 2a")
    rows_b = _edit(_edit(ROWS, "m2", ",20,Hz", ",22,Hz"), "m4", "Fig. 2", "Fig. 2c")
    del rows_b["m6"]
    rows_a = _edit(rows_a, "m6", "Table 4", "Table 4a")
    a, b = _write(tmp_path / "a", rows=rows_a), _write(tmp_path / "b", rows=rows_b)
    assert _merge_cli(tmp_path, a, b, base).returncode == 2
    first = tmp_path / "OUT.conflicts.csv"
    rows = list(csv.DictReader(open(first)))
    assert [(r["key"], r["column"]) for r in rows] == [
        ("m2", "value"),
        ("m4", "locator"),
        ("m6", ""),
    ]
    rows[0]["take"] = "a"
    rows[2]["take"] = "Table 9"  # a hand value for a whole row: refused
    with open(first, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    res = _merge_cli(tmp_path, a, b, base, resolve=first)
    assert res.returncode == 2 and "m6" in res.stderr and "cell only" in res.stderr
    rows[2]["take"] = "b"
    with open(first, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    kept = first.read_bytes()
    res = _merge_cli(tmp_path, a, b, base, resolve=first)
    assert res.returncode == 2 and not (tmp_path / "OUT").exists()
    assert first.read_bytes() == kept
    second = list(csv.DictReader(open(tmp_path / "OUT.conflicts-2.csv")))
    assert [r["take"] for r in second] == ["a", "", "b"]
    second[1]["take"] = "Fig. 2b"
    with open(tmp_path / "OUT.conflicts-2.csv", "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(second[0]))
        w.writeheader()
        w.writerows(second)
    res = _merge_cli(tmp_path, a, b, base, resolve=tmp_path / "OUT.conflicts-2.csv")
    assert res.returncode == 0, res.stderr
    got = _table(tmp_path / "OUT" / "observations.csv", "obs_id")
    assert (got["m2"]["value"], got["m4"]["locator"], "m6" in got) == ("21", "Fig. 2b", False)


def test_merged_dataset_that_fails_check_is_not_written(tmp_path, base):
    """A row added by A citing a source B removed (unchanged on A): each edit is clean, the
    merge is not; the check's problem is printed, exit 2, OUT not written."""
    rows_a = {**ROWS, "m9": "m9,Manduca sexta,body_mass,1510,mg,,,k3,Table 9,reported"}
    rows_b = dict(ROWS)
    del rows_b["m7"]
    src_b = {k: v for k, v in SOURCES.items() if k != "k3"}
    a = _write(tmp_path / "a", rows=rows_a)
    b = _write(tmp_path / "b", rows=rows_b, sources=src_b)
    res = _merge_cli(tmp_path, a, b, base)
    assert res.returncode == 2
    assert "k3" in res.stderr
    assert not (tmp_path / "OUT").exists()
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".OUT")] == []
