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

HOSTILE_TOML = '''[quantities.twitch_time]
unit = "ms"
kind = "time"
label = "=HYPERLINK(\\"http://example.org\\",\\"click\\")"
description = "=1+1"
range = [0.1, 1000]
range_source = "@SUM(1)"
synonyms = ["-2+3", "+cmd|' /C calc'!A0"]
'''


def test_template_writes_settings_text_as_plain_strings(tmp_path):
    ds = write_dataset(tmp_path / "DS")
    (ds / "comparo.toml").write_text(HOSTILE_TOML, encoding="utf-8")
    before = snapshot(tmp_path)
    proc = run_main("template", "-o", str(tmp_path / "t.xlsx"), "--dataset", str(ds))
    assert proc.returncode == 0, proc.stderr
    assert changed_outside(before, snapshot(tmp_path), ("t.xlsx",)) == []
    wb = openpyxl.load_workbook(tmp_path / "t.xlsx")
    formulas = [(ws.title, c.coordinate, c.value) for ws in wb for row in ws.iter_rows() for c in row
                if c.data_type == "f"]
    assert formulas == []
    texts = {c.value for ws in wb for row in ws.iter_rows() for c in row if isinstance(c.value, str)}
    assert {'=HYPERLINK("http://example.org","click")', "=1+1", "@SUM(1)", "-2+3; +cmd|' /C calc'!A0"} <= texts
    hostile = [c for ws in wb for row in ws.iter_rows() for c in row
               if isinstance(c.value, str) and c.value[:1] in "=@+-"]
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


@pytest.mark.parametrize(("header", "cells", "expected"), [
    ("Myofibril volume fraction (%)", [(0.5, "0%"), (0.123, "0.0%"), (45, "General"), (0.6, '0.0"%"')],
     ["50", "12.3", "45", "0.6"]),
    ("Myofibril volume fraction (-)", [(0.5, "0%"), (0.45, "General")], ["0.5", "0.45"]),
    ("Myofibril volume fraction (1)", [(0.5, "0%")], ["0.5"]),
])
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
    assert "cell B3 is formatted as a percentage (the sheet shows 50%) but the column's unit is 'g'" in proc.stderr
    assert changed_outside(before, snapshot(tmp_path)) == []
