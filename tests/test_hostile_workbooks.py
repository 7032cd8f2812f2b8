"""Hostile workbooks, in and out.

* Out: every text comparo writes into the entry workbook is a stored string, never a
  formula, even when a dataset's comparo.toml gives a label or description such as
  ``=HYPERLINK(...)`` (read back with openpyxl, an independent reader of the format:
  no cell has data type ``f``).
* In: a number cell formatted as a percentage (the sheet shows 50%, the file stores 0.5)
  reads as the sheet shows it under a ``(%)`` header (ECMA-376 Part 1, 18.8.31: a ``%`` in
  a number format multiplies the value by 100 for display), as stored under a
  dimensionless header, and is an error naming the cell under any other unit.
The cases are our own."""

from __future__ import annotations

import pytest
from hostile_tools import changed_outside, snapshot
from support import run_main, write_dataset

openpyxl = pytest.importorskip("openpyxl")

HOSTILE_TOML = """[quantities.twitch_time]
unit = "ms"
kind = "time"
label = "=HYPERLINK(\\"http://example.org\\",\\"click\\")"
description = "=1+1"
range = [0.1, 1000]
range_source = "@SUM(1)"
synonyms = ["-2+3", "+cmd|' /C calc'!A0"]
"""


def test_template_writes_settings_text_as_plain_strings(tmp_path):
    ds = write_dataset(tmp_path / "DS")
    (ds / "comparo.toml").write_text(HOSTILE_TOML, encoding="utf-8")
    before = snapshot(tmp_path)
    proc = run_main("template", "-o", str(tmp_path / "t.xlsx"), "--dataset", str(ds))
    assert proc.returncode == 0, proc.stderr
    assert changed_outside(before, snapshot(tmp_path), ("t.xlsx",)) == []
    wb = openpyxl.load_workbook(tmp_path / "t.xlsx")
    formulas = [
        (ws.title, c.coordinate, c.value)
        for ws in wb
        for row in ws.iter_rows()
        for c in row
        if c.data_type == "f"
    ]
    assert formulas == []
    texts = {
        c.value for ws in wb for row in ws.iter_rows() for c in row if isinstance(c.value, str)
    }
    assert {
        '=HYPERLINK("http://example.org","click")',
        "=1+1",
        "@SUM(1)",
        "-2+3; +cmd|' /C calc'!A0",
    } <= texts
    hostile = [
        c
        for ws in wb
        for row in ws.iter_rows()
        for c in row
        if isinstance(c.value, str) and c.value[:1] in "=@+-"
    ]
    assert hostile and all(c.data_type == "s" and c.quotePrefix for c in hostile)


def _percent_book(path, header, cells):
    """A one-trait wide workbook: (value, number format) per row."""
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["Species", header, "Source"])
    for i, (v, fmt) in enumerate(cells, start=2):
        ws.append([f"Taxon{'abcdefgh'[i]} species", v, "s1"])
        ws.cell(row=i, column=2).number_format = fmt
    wb.save(path)


@pytest.mark.parametrize(
    ("header", "cells", "expected"),
    [
        (
            "Myofibril volume fraction (%)",
            [(0.5, "0%"), (0.123, "0.0%"), (45, "General"), (0.6, '0.0"%"')],
            ["50", "12.3", "45", "0.6"],
        ),
        ("Myofibril volume fraction (-)", [(0.5, "0%"), (0.45, "General")], ["0.5", "0.45"]),
        ("Myofibril volume fraction (1)", [(0.5, "0%")], ["0.5"]),
    ],
)
def test_percent_cells_read_as_the_sheet_shows_them(tmp_path, header, cells, expected):
    """A literal "%" in quotes (0.0"%") does not scale: the sheet shows 0.6%."""
    wide = tmp_path / "w.xlsx"
    _percent_book(wide, header, cells)
    before = snapshot(tmp_path)
    proc = run_main("import", str(wide), "-o", str(tmp_path / "I"))
    assert proc.returncode == 0, proc.stderr
    assert changed_outside(before, snapshot(tmp_path), ("I",)) == []
    import pandas as pd

    obs = pd.read_csv(tmp_path / "I" / "observations.csv", dtype=str)
    assert list(obs["value"]) == expected


def test_a_percent_cell_under_another_unit_is_an_error_naming_it(tmp_path):
    wide = tmp_path / "w.xlsx"
    _percent_book(wide, "Body mass (g)", [(0.1, "General"), (0.5, "0%")])
    before = snapshot(tmp_path)
    proc = run_main("import", str(wide), "-o", str(tmp_path / "I"))
    assert proc.returncode == 2
    assert (
        "cell B3 is formatted as a percentage (the sheet shows 50%) but the column's unit is 'g'"
        in proc.stderr
    )
    assert changed_outside(before, snapshot(tmp_path)) == []


def test_a_dataset_workbook_reads_percent_cells_by_the_rows_unit(tmp_path):
    """The entry workbook filled in a spreadsheet: 50% (stored 0.5) with unit % is 50 %, a
    5% spread with it is 5 %, and 45% with unit 1 is 0.45 (canonical: a fraction)."""
    book = tmp_path / "e.xlsx"
    assert run_main("template", "-o", str(book)).returncode == 0
    wb = openpyxl.load_workbook(book)
    ws = wb["observations"]
    head = [c.value for c in ws[1]]
    rows = [
        dict(
            obs_id="o1",
            taxon="Apis mellifera",
            value=0.5,
            unit="%",
            uncertainty=0.05,
            uncertainty_kind="sd",
        ),
        dict(obs_id="o2", taxon="Bombus terrestris", value=0.45, unit="1"),
        dict(obs_id="o3", taxon="Vespa crabro", value=40, unit="%"),
    ]
    for r, rec in enumerate(rows, start=2):
        rec.update(
            quantity="myofibril_volume_fraction",
            source_id="s1",
            locator="Table 1",
            basis="reported",
        )
        for k, v in rec.items():
            cell = ws.cell(row=r, column=head.index(k) + 1, value=v)
            if k in ("value", "uncertainty") and r < 4:
                cell.number_format = "0%"
    wb["sources"]["A2"], wb["sources"]["B2"] = "s1", "Invented A. (2001) One"
    wb.save(book)
    before = snapshot(tmp_path)
    proc = run_main("table", str(book))
    assert proc.returncode == 0, proc.stderr
    assert snapshot(tmp_path) == before
    lines = [ln.split(",") for ln in proc.stdout.splitlines()]
    col = lines[0].index("myofibril_volume_fraction")
    assert [(ln[0], float(ln[col]), ln[col + 1]) for ln in lines[1:]] == [
        ("Apis mellifera", 0.5, "0.05"),
        ("Bombus terrestris", 0.45, ""),
        ("Vespa crabro", 0.4, ""),
    ]
