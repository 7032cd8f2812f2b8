"""Hostile workbooks: damaged cell records, numbers that are not finite, a declared or real
span of a whole spreadsheet, and sheets that inflate far beyond their file. Each is exit 2
naming the workbook and the rule, or reads only the cells present; the workbook stays
byte-identical and nothing appears outside the output."""

from __future__ import annotations

import re
import shutil
import time
import zipfile
from pathlib import Path

import pytest
from hostile_checks import refused, snapshot
from support import DEMO, run_main

SHEET = "xl/worksheets/sheet1.xml"


def _wide(path: Path) -> Path:
    import openpyxl

    book = openpyxl.Workbook()
    ws = book.active
    ws.append(["Species", "Body mass (g)", "Source"])
    ws.append(["Apis mellifera", 0.1, "S1"])
    ws.append(["Bombus terrestris", 0.2, "S1"])
    book.save(path)
    return path


def _observations(folder: Path) -> Path:
    """A dataset folder whose observations table is a workbook (the demo's first rows)."""
    import openpyxl
    import pandas as pd

    folder.mkdir()
    obs = pd.read_csv(DEMO / "observations.csv", dtype=str, keep_default_na=False).head(8)
    book = openpyxl.Workbook()
    ws = book.active
    ws.title = "observations"
    ws.append(list(obs.columns))
    for rec in obs.itertuples(index=False):
        ws.append([float(v) if i == 3 else v for i, v in enumerate(rec)])
    book.save(folder / "observations.xlsx")
    shutil.copy(DEMO / "sources.csv", folder / "sources.csv")
    return folder / "observations.xlsx"


def _patch(path: Path, edit) -> None:
    """Rewrite the first sheet's XML of *path* with *edit* (text -> text)."""
    with zipfile.ZipFile(path) as zin:
        items = [(i, zin.read(i.filename)) for i in zin.infolist()]
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zout:
        for info, data in items:
            if info.filename == SHEET:
                new = edit(data.decode())
                assert new != data.decode(), "the edit changed nothing"
                data = new.encode()
            zout.writestr(info, data)


def _value(cell: str, text: str):
    """Replace the stored value of *cell* by *text* as written in the XML."""
    return lambda s: re.sub(
        rf'<c r="{cell}"([^>]*)><v>[^<]*</v>', rf'<c r="{cell}"\1><v>{text}</v>', s
    )


DAMAGED = {
    "nan-record": _value("B3", "NaN"),
    "inf-record": _value("B3", "inf"),
    "text-in-number": _value("B3", "abc"),
    "column-beyond-ZZZ": lambda s: s.replace('r="B3"', 'r="ZZZZZZ3"'),
    "duplicate-attribute": lambda s: s.replace('r="B3"', 'r="B3" r="B3"'),
    "unclosed-tag": lambda s: s.replace("<v>0.2</v>", "<v>0.2"),
}


@pytest.mark.parametrize("case", sorted(DAMAGED))
def test_damaged_cell_record_in_an_imported_workbook(tmp_path, case):
    _patch(_wide(tmp_path / "wide.xlsx"), DAMAGED[case])
    refused(
        tmp_path,
        ["import", "{tmp}/wide.xlsx", "-o", "{tmp}/out"],
        "wide.xlsx",
        "cannot read the sheet",
        "xlsx-read",
    )


DAMAGED_D3 = {
    "nan-record": lambda s: re.sub(r'(<c r="D3"[^>]*>)<v>[^<]*</v>', r"\1<v>NaN</v>", s),
    "text-in-number": lambda s: re.sub(r'(<c r="D3"[^>]*>)<v>[^<]*</v>', r"\1<v>abc</v>", s),
    "duplicate-attribute": lambda s: s.replace('r="D3"', 'r="D3" r="D3"'),
}


@pytest.mark.parametrize("case", sorted(DAMAGED_D3))
def test_damaged_cell_record_in_a_dataset_table(tmp_path, case):
    _patch(_observations(tmp_path / "DS"), DAMAGED_D3[case])
    for command in (
        ["check", "{tmp}/DS"],
        ["table", "{tmp}/DS"],
        ["fit", "{tmp}/DS", "--x", "body_mass", "--y", "frequency_observed"],
    ):
        refused(tmp_path, command, "observations.xlsx", "cannot read the sheet", "xlsx-read")


def test_numbers_beyond_a_double_in_an_imported_workbook(tmp_path):
    """1e400 is stored as a number but reads as infinity: refused at its cell, never imported."""
    _patch(
        _wide(tmp_path / "wide.xlsx"), lambda s: _value("B3", "-1E999")(_value("B2", "1e400")(s))
    )
    said = refused(tmp_path, ["import", "{tmp}/wide.xlsx", "-o", "{tmp}/out"], "non-finite")
    assert "cell B2 holds inf" in said and "cell B3 holds -inf" in said


def test_numbers_beyond_a_double_in_a_dataset_table(tmp_path):
    _patch(
        _observations(tmp_path / "DS"),
        lambda s: re.sub(r'(<c r="D3"[^>]*>)<v>[^<]*</v>', r"\1<v>1e400</v>", s),
    )
    refused(
        tmp_path, ["check", "{tmp}/DS"], "observations.xlsx", "not a finite number", "non-finite"
    )


def _far_cell(s: str) -> str:
    return s.replace(
        "</sheetData>", '<row r="1048576"><c r="XFD1048576" t="n"><v>1</v></c></row></sheetData>'
    )


def test_one_cell_at_the_far_corner_is_refused_before_loading(tmp_path):
    """A 5 KB workbook with one cell at XFD1048576 spans 1.7e10 cells; reading it padded every
    row and hung. The span is measured by streaming the XML, before openpyxl loads it."""
    _patch(_wide(tmp_path / "wide.xlsx"), _far_cell)
    t0 = time.perf_counter()
    said = refused(
        tmp_path,
        ["import", "{tmp}/wide.xlsx", "-o", "{tmp}/out"],
        "row 1,048,576 and column 16,384",
        "limit of 10,000,000",
        "xlsx-size",
    )
    assert time.perf_counter() - t0 < 20, said


def test_far_corner_in_a_dataset_table_and_a_dataset_workbook(tmp_path):
    _patch(_observations(tmp_path / "DS"), _far_cell)
    refused(tmp_path, ["check", "{tmp}/DS"], "xlsx-size", "limit of 10,000,000")
    shutil.move(tmp_path / "DS" / "observations.xlsx", tmp_path / "book.xlsx")
    refused(tmp_path, ["check", "{tmp}/book.xlsx"], "xlsx-size")


def test_a_huge_declared_dimension_reads_only_the_cells_present(tmp_path):
    """The declared dimension says A1:XFD1048576 for three rows: the import reads the three
    rows (quickly) and writes only its output folder."""
    wide = tmp_path / "wide.xlsx"
    _patch(
        _wide(wide),
        lambda s: re.sub(r'<dimension ref="[^"]*" ?/>', '<dimension ref="A1:XFD1048576"/>', s),
    )
    before = wide.read_bytes()
    t0 = time.perf_counter()
    proc = run_main("import", str(wide), "-o", str(tmp_path / "out"))
    assert proc.returncode == 0, proc.stderr
    assert time.perf_counter() - t0 < 20
    assert wide.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out", "wide.xlsx"]
    assert (tmp_path / "out" / "observations.csv").read_text().count("body_mass") == 2


def test_a_row_beyond_the_declared_dimension_is_not_dropped(tmp_path):
    """The declared dimension (A1:C3) ends before the last row (row 100,000): that row is
    imported, not silently dropped."""
    wide = tmp_path / "wide.xlsx"
    _patch(
        _wide(wide),
        lambda s: s.replace(
            "</sheetData>",
            '<row r="100000"><c r="A100000" t="inlineStr"><is><t>Apis cerana</t></is></c>'
            '<c r="B100000" t="n"><v>0.07</v></c><c r="C100000" '
            't="inlineStr"><is><t>S1</t></is></c></row></sheetData>',
        ),
    )
    proc = run_main("import", str(wide), "-o", str(tmp_path / "out"))
    assert proc.returncode == 0, proc.stderr
    assert "Apis cerana,body_mass,0.07" in (tmp_path / "out" / "observations.csv").read_text()


def test_sheet_xml_beyond_the_cap_is_refused_before_inflating(tmp_path, monkeypatch):
    """The uncompressed size is read from the zip directory, so a sheet that would inflate to
    gigabytes is refused without inflating it (the cap is lowered here to keep the test small)."""
    import comparo.reading.workbook

    monkeypatch.setattr(comparo.reading.workbook, "MAX_SHEET_XML_BYTES", 64 * 1024)
    _patch(
        _wide(tmp_path / "wide.xlsx"),
        lambda s: s.replace("</sheetData>", "</sheetData><!--" + " " * 100_000 + "-->"),
    )
    refused(
        tmp_path,
        ["import", "{tmp}/wide.xlsx", "-o", "{tmp}/out"],
        "xlsx-size",
        "inflates to 0.1 MB of XML",
        "at most 0.1 MB per sheet",
    )


def test_snapshot_sees_a_changed_byte(tmp_path):
    """The byte-identity check itself fails on a changed byte (guards the guard)."""
    (tmp_path / "f").write_bytes(b"ab")
    before = snapshot(tmp_path)
    (tmp_path / "f").write_bytes(b"ac")
    assert snapshot(tmp_path) != before
