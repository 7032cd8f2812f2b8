"""Wide tables as curators keep them, and what their column headers mean.

A wide table has one row per taxon (or per taxon and source) and one column per
trait, with the unit written into the header: ``Body mass (g)``, ``Fibre radius
[µm]``, ``Body mass SD (g)``. This module reads such a table (CSV, TSV or an XLSX
sheet) into a grid of cells with their spreadsheet coordinates, and matches each
header to what it holds: a catalogue quantity (by key, label or synonym,
case- and spelling-tolerantly), the spread or sample size of one, or one of the
long-format columns (taxon, source, locator, temperature, n ...). It never
guesses: a header that matches nothing, or more than one quantity, stays
unresolved with its closest candidates, for the curator to decide in a map file.

The conversion to comparo's long format is :mod:`comparo.curation.importing`.
"""

from __future__ import annotations

import csv
import io as _io
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from comparo.base.errors import Problem, problem
from comparo.reading.text import (
    CONTROL,
    MAX_CELL,
    control_cell,
    decode_bytes,
    duplicate_headers,
    long_cell,
    nfc,
    semicolon_problem,
    sniff_delimiter,
    too_many_columns,
)
from comparo.reading.workbook import column_letter, read_sheet_cells

# --------------------------------------------------------------------------- the grid


@dataclass
class Grid:
    """A wide table as read: header texts, and per data row its spreadsheet row number
    and cells (``str`` as typed; ``float`` for a number cell of a workbook)."""

    file: str  # name shown in messages: 'wide.csv' or 'wide.xlsx[Sheet1]'
    header: list[str]
    header_row: int
    rows: list[list[Any]]
    row_numbers: list[int]
    delimiter: str = ""  # text files: the field delimiter found

    def coordinate(self, row_index: int, col: int) -> str:
        return f"{column_letter(col)}{self.row_numbers[row_index]}"


def read_grid(
    path: Path, sheet: str | None = None, decimal_comma: bool = False, header_row: int | None = None
) -> tuple[Grid | None, list[Problem]]:
    """Read a wide table: ``.xlsx``/``.xlsm`` (the sheet *sheet*, else the first), else text
    (comma-, tab- or, with *decimal_comma*, semicolon-delimited). The header is on row
    *header_row* (1-based, as a spreadsheet shows it; the rows above are ignored), else on the
    first non-blank row; a title row above the headers is then reported once, naming the row
    that looks like the header (see :func:`title_rows`)."""
    if not path.is_file():
        return None, [
            problem(str(path), "missing-file", "the wide table does not exist or is not a file")
        ]
    if path.suffix.lower() in (".xlsx", ".xlsm"):
        cells, file, probs = read_sheet_cells(path, sheet)
        if cells is not None:  # text of the sheet in Unicode NFC, as text tables are read
            cells = [[nfc(v) if isinstance(v, str) else v for v in r] for r in cells]
    else:
        if sheet:
            return None, [
                problem(
                    path.name,
                    "sheet-option",
                    "--sheet applies to a workbook (.xlsx), not to a text table",
                )
            ]
        cells, delim, probs = _text_cells(path, decimal_comma, header_row)
        file = path.name
    if cells is None:
        return None, probs
    if header_row is None:
        title = title_rows(cells)
        if title is not None:
            first, proposed = title
            shown = " ".join(str(c) for c in cells[first] if str(c).strip())[:60]
            return None, probs + [
                problem(
                    file,
                    "title-row",
                    f"row {first + 1} ({shown!r}) looks like a title, not the column headers; the "
                    f"headers seem to be on row {proposed}",
                    f"use --header-row {proposed} (the rows above it are then ignored)",
                    row=first + 1,
                )
            ]
    elif header_row > len(cells):
        return None, probs + [
            problem(
                file,
                "header-row",
                f"--header-row {header_row}, but the table has {len(cells)} row(s)",
                "give the row number of the column headers, as the spreadsheet shows it",
            )
        ]
    grid, more = _grid(file, cells, header_row)
    if grid is not None and path.suffix.lower() not in (".xlsx", ".xlsm"):
        grid.delimiter = delim
    return grid, probs + more


def _text_cells(
    path: Path, decimal_comma: bool, header_row: int | None = None
) -> tuple[list[list[Any]] | None, str, list[Problem]]:
    file = path.name
    try:
        data = path.read_bytes()
    except OSError as exc:
        return None, "", [problem(file, "file-read", f"cannot read file ({exc.strerror})")]
    text, probs = decode_bytes(data, file)
    if text is None:
        return None, "", probs
    text = text.replace("\r\n", "\n").replace("\r", "\n")
    lines = text.split("\n")
    if header_row is not None and header_row <= len(lines):
        lines = lines[header_row - 1 :]  # the delimiter is the header's
    if not any(ln.strip() for ln in lines):
        empty = problem(
            file, "empty-file", "file is empty", "put the column headers in the first row"
        )
        return None, "", probs + [empty]
    delim = sniff_delimiter([ln for ln in lines if ln.strip()], path.suffix)
    if delim == ";" and not decimal_comma:
        hint = "rerun with --decimal-comma to read it so"
        return None, delim, probs + [semicolon_problem(file, text, hint)]
    try:
        cells = [list(r) for r in csv.reader(_io.StringIO(text), delimiter=delim)]
    except csv.Error as exc:
        return None, delim, probs + [problem(file, "csv-syntax", f"cannot parse the table ({exc})")]
    from comparo.base.csvsafe import restore  # the apostrophe of a CSV comparo wrote

    return (
        [[restore(nfc(c)) if c.startswith("'") else nfc(c) for c in r] for r in cells],
        delim,
        probs,
    )


def _blank(row: list[Any]) -> bool:
    return all(isinstance(c, str) and not c.strip() for c in row)


def _filled_count(row: list[Any]) -> int:
    return sum(not (isinstance(c, str) and not c.strip()) for c in row)


def title_rows(cells: list[list[Any]]) -> tuple[int, int] | None:
    """``(first row index, proposed header row number)`` when the first non-blank row looks
    like a title rather than headers: it fills at most two cells while a row among the next
    ten fills at least three and more than twice as many; the proposed header is the first
    such row with the most cells filled (headers are the row a curator fills whole)."""
    filled = [(i, _filled_count(r)) for i, r in enumerate(cells) if not _blank(r)][:11]
    if len(filled) < 2:
        return None
    first, k = filled[0]
    most = max(n for _, n in filled[1:])
    if k > 2 or most < 3 or most <= 2 * k:
        return None
    proposed = next(i for i, n in filled[1:] if n == most)
    return first, proposed + 1


def _grid(
    file: str, cells: list[list[Any]], header_row: int | None = None
) -> tuple[Grid | None, list[Problem]]:
    blank = _blank
    if header_row is not None:
        first = header_row - 1
        if blank(cells[first]):
            return None, [
                problem(
                    file,
                    "header-row",
                    f"row {header_row} (--header-row) is blank",
                    "give the row number of the column headers, as the spreadsheet shows it",
                    row=header_row,
                )
            ]
    else:
        first = next((i for i, r in enumerate(cells) if not blank(r)), None)
    if first is None:
        return None, [
            problem(
                file,
                "empty-file",
                "the table holds no header row",
                "put the column headers in the first row",
            )
        ]
    header = [(h if isinstance(h, str) else repr(h)).strip().lstrip("\ufeff") for h in cells[first]]
    while header and not header[-1]:
        header.pop()
    wide = too_many_columns(file, len(header), row=first + 1)
    if wide is not None:
        return None, [wide]
    probs: list[Problem] = []
    hrow = first + 1
    probs += duplicate_headers(file, header, hrow, where=column_letter)
    rows, numbers = [], []
    for r in range(first + 1, len(cells)):
        row = list(cells[r])
        if blank(row):
            continue
        for c in range(len(header), len(row)):
            v = row[c]
            if not (isinstance(v, str) and not v.strip()):
                probs.append(
                    problem(
                        file,
                        "cell-without-header",
                        f"cell {column_letter(c)}{r + 1} is beyond the last header",
                        "give the column a header, or delete the cell (a stray delimiter?)",
                        row=r + 1,
                        value=str(v)[:40],
                    )
                )
        row = (row + [""] * len(header))[: len(header)]
        for c, v in enumerate(row):
            if isinstance(v, str):
                v = v.strip()
                where = f"{column_letter(c)}{r + 1}"
                if len(v) > MAX_CELL:
                    probs.append(long_cell(file, r + 1, header[c] or None, v, where))
                    v = v[:MAX_CELL]
                if CONTROL.search(v):
                    probs.append(control_cell(file, r + 1, header[c] or None, v, where))
                row[c] = v
            if not header[c] and not (isinstance(v, str) and not v):
                probs.append(
                    problem(
                        file,
                        "column-name",
                        f"column {column_letter(c)} holds data but has no header (cell "
                        f"{column_letter(c)}{r + 1})",
                        "give every column its own header",
                        row=r + 1,
                        value=str(v)[:40],
                    )
                )
        rows.append(row)
        numbers.append(r + 1)
    return Grid(file, header, hrow, rows, numbers), probs
