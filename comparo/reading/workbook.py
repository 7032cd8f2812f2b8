"""The one reader of .xlsx workbooks: size checks before loading, the cells of a sheet
(numbers, dates, percentages, formulas without a saved result), and a sheet as a
:class:`~comparo.reading.tables.RawTable`."""

from __future__ import annotations

import re
from functools import lru_cache
from pathlib import Path
from typing import Any

from comparo.base.errors import Problem, problem
from comparo.reading.tables import RawTable, finish_table
from comparo.reading.text import duplicate_headers, exception_reason, nfc

# Workbook bounds, checked before openpyxl reads a sheet: a few-KB .xlsx can declare (or place
# one stray cell at) row 1,048,576 and column XFD, and its sheet XML can inflate to gigabytes.
MAX_SHEET_XML_BYTES = 512 * 2**20  # uncompressed XML of one sheet (or of the shared strings)
MAX_SHEET_CELLS = 10_000_000  # rows times columns a sheet's cells span


def _letters_index(letters: str) -> int:
    n = 0
    for ch in letters:
        n = 26 * n + ord(ch) - 64
    return n


def _sheet_span(book: Any, info: Any) -> tuple[int, int]:
    """Last row and last column (1-based) of the cells present in one sheet's XML, read
    streaming (expat, no tree kept); stops early once the span passes MAX_SHEET_CELLS."""
    from xml.parsers import expat

    span = {"row": 0, "col": 0, "last_row": 0, "last_col": 0}
    cell = re.compile(r"([A-Z]{1,3})(\d*)$")

    def start(name: str, attrs: dict[str, str]) -> None:
        tag = name.rsplit(":", 1)[-1]
        if tag == "row":
            r = attrs.get("r", "")
            span["row"] = int(r) if r.isdigit() else span["row"] + 1
            span["col"] = 0
            span["last_row"] = max(span["last_row"], span["row"])
        elif tag == "c":
            m = cell.match(attrs.get("r", ""))
            span["col"] = _letters_index(m.group(1)) if m else span["col"] + 1
            span["last_col"] = max(span["last_col"], span["col"])

    parser = expat.ParserCreate()
    parser.StartElementHandler = start
    with book.open(info) as fh:
        while chunk := fh.read(1 << 20):
            parser.Parse(chunk, False)
            if span["last_row"] * span["last_col"] > MAX_SHEET_CELLS:
                break
        else:
            parser.Parse(b"", True)
    return span["last_row"], span["last_col"]


def workbook_problems(path: Path) -> list[Problem]:
    """Size checks of an .xlsx before it is loaded: each sheet's (and the shared strings')
    uncompressed XML at most :data:`MAX_SHEET_XML_BYTES`, and the rows times columns its
    cells span at most :data:`MAX_SHEET_CELLS` (counted from the cells actually present,
    streaming, not from the declared dimension). A file that is not a zip is left to the
    reader's own message."""
    import zipfile

    file = path.name
    try:
        book = zipfile.ZipFile(path)
    except (zipfile.BadZipFile, OSError, ValueError):
        return []
    probs: list[Problem] = []
    with book:
        members = [
            i
            for i in book.infolist()
            if re.fullmatch(r"xl/(worksheets/[^/]+\.xml|sharedStrings\.xml)", i.filename)
        ]
        for info in members:
            if info.file_size > MAX_SHEET_XML_BYTES:
                probs.append(
                    problem(
                        file,
                        "xlsx-size",
                        f"{info.filename} inflates to {info.file_size / 2**20:,.1f} MB "
                        f"of XML; comparo reads at most {MAX_SHEET_XML_BYTES / 2**20:,.1f} MB per "
                        "sheet",
                        "split the table over several files, or save it as CSV",
                    )
                )
        if probs:
            return probs
        for info in members:
            if not info.filename.startswith("xl/worksheets/"):
                continue
            try:
                last_row, last_col = _sheet_span(book, info)
            except Exception:  # a damaged sheet: the reader says what is wrong with it
                continue
            if last_row * last_col > MAX_SHEET_CELLS:
                probs.append(
                    problem(
                        file,
                        "xlsx-size",
                        f"a sheet ({info.filename}) has cells as far as row {last_row:,} "
                        f"and column {last_col:,}: {last_row * last_col:,} cells to read, more "
                        "than "
                        f"comparo's limit of {MAX_SHEET_CELLS:,}",
                        "delete the stray cells (or formatting) beyond the table, or save it as "
                        "CSV",
                    )
                )
    return probs


def sheet_names(path: Path) -> tuple[list[str] | None, list[Problem]]:
    """The sheets of a workbook, after the size checks of :func:`workbook_problems`; ``None``
    and the problem when it is too big or cannot be opened."""
    import openpyxl

    too_big = workbook_problems(path)
    if too_big:
        return None, too_big
    try:
        book = openpyxl.load_workbook(path, read_only=True)
        names = list(book.sheetnames)
        book.close()
    except Exception as exc:  # openpyxl raises many types for a broken workbook
        return None, [cannot_open(path.name, exc)]
    return names, []


def cannot_open(file: str, exc: Exception) -> Problem:
    """The problem of a workbook openpyxl cannot open."""
    return problem(
        file,
        "xlsx-read",
        f"cannot open the workbook ({exception_reason(exc)})",
        "check that it is an .xlsx file (not .xls, or CSV renamed)",
    )


def missing_sheet(file: str, sheet: str, names: list[str], hint: str) -> Problem:
    """The problem of a sheet the workbook does not hold."""
    return problem(
        file,
        "missing-sheet",
        f"the workbook has no sheet {sheet!r} (its sheets: {', '.join(names)})",
        hint,
    )


def read_sheet_cells(
    path: Path, sheet: str | None, fallback: bool = False
) -> tuple[list[list[Any]] | None, str, list[Problem]]:
    """The cells of one sheet, the one workbook reader of comparo: returns (cells, the name
    messages use, ``'book.xlsx[Sheet]'``, problems).

    *sheet* ``None`` reads the first sheet; a *sheet* the workbook lacks is the first
    sheet with *fallback*, else the error ``missing-sheet``. ``cells[i][j]`` is row i + 1,
    column j + 1 as the sheet shows them: a number cell a ``float`` (:class:`Percent` when
    formatted as a percentage), a date ISO 8601 text, TRUE/FALSE text, anything else text in
    text as typed, an empty cell ``''``. A formula without a saved result is the error
    ``formula-no-value`` (its cell read as empty), a number that is not finite ``non-finite``."""
    import openpyxl

    file = path.name
    too_big = workbook_problems(path)
    if too_big:
        return None, file, too_big
    try:
        book = openpyxl.load_workbook(path, read_only=True, data_only=True)
        formulas = openpyxl.load_workbook(path, read_only=True, data_only=False)
    except Exception as exc:  # openpyxl raises many types for a broken workbook
        return None, file, [cannot_open(file, exc)]
    try:
        names = book.sheetnames
        if sheet is not None and sheet not in names and not fallback:
            return None, file, [missing_sheet(file, sheet, names, "name the sheet with --sheet")]
        chosen = sheet if sheet in names else names[0]
        file = f"{path.name}[{chosen}]"
        return _sheet_cells(book, formulas, chosen, file)
    except Exception as exc:  # openpyxl raises many types for a damaged cell record
        return (
            None,
            file,
            [
                problem(
                    file,
                    "xlsx-read",
                    "cannot read the sheet: a cell record is damaged or holds no finite "
                    f"number ({exception_reason(exc)})",
                    "open the workbook in a spreadsheet program and save it again, "
                    "or save the sheet as CSV",
                )
            ],
        )
    finally:
        book.close()
        formulas.close()


def _sheet_cells(
    book: Any, formulas: Any, chosen: str, file: str
) -> tuple[list[list[Any]], str, list[Problem]]:
    probs: list[Problem] = []
    cells: list[list[Any]] = []
    sheets = [book[chosen], formulas[chosen]]
    for ws in sheets:
        ws.reset_dimensions()  # the declared dimension may be wrong: read the cells present
    rows = zip(sheets[0].iter_rows(), sheets[1].iter_rows(values_only=True), strict=False)
    for r, (found, forms) in enumerate(rows, start=1):
        row: list[Any] = []
        for c, (cell, f) in enumerate(zip(found, forms, strict=False)):
            v = getattr(cell, "value", None)
            if v is None and isinstance(f, str) and f.startswith("="):
                probs.append(
                    problem(
                        file,
                        "formula-no-value",
                        f"cell {column_letter(c)}{r} holds a formula with no saved result",
                        "open the workbook in a spreadsheet program and save it, "
                        "so that the results are stored",
                        row=r,
                        value=f[:40],
                    )
                )
            row.append(_cell(v, getattr(cell, "number_format", ""), file, (r, c), probs))
        cells.append(row)
    return cells, file, probs


def _cell(
    v: Any, number_format: str | None, file: str, at: tuple[int, int], probs: list[Problem]
) -> Any:
    """One cell's value as :func:`read_sheet_cells` returns it."""
    import datetime as _dt
    import math

    if isinstance(v, bool):
        return str(v).upper()
    if isinstance(v, int | float):
        if not math.isfinite(v):
            probs.append(
                problem(
                    file,
                    "non-finite",
                    f"cell {column_letter(at[1])}{at[0]} holds {v!r}, not a finite number",
                    "type the value, or leave the cell empty",
                    row=at[0],
                    value=repr(v),
                )
            )
            return ""
        return Percent(v) if is_percent_format(number_format) else float(v)
    if isinstance(v, _dt.datetime | _dt.date):
        return (
            v.isoformat()[:10]
            if isinstance(v, _dt.datetime) and v.time() == _dt.time()
            else v.isoformat()
        )
    return "" if v is None else str(v)


def number_text(v: float) -> str:
    """A workbook's number as text: whole numbers below 10^15 without a decimal point
    (``'12'``), others as Python writes them exactly (``'0.1'``, ``'1e+20'``)."""
    return str(int(v)) if v.is_integer() and abs(v) < 1e15 else repr(float(v))


def read_excel_table(path: Path, sheet: str) -> tuple[RawTable | None, list[Problem]]:
    """Read the sheet named *sheet* (else the first sheet) of an XLSX workbook into a
    :class:`RawTable` (cells by :func:`read_sheet_cells`, header on the first non-blank row).
    Numbers of ``value`` and ``uncertainty`` formatted as a percentage, on rows whose ``unit``
    is a percent, are read as the sheet shows them (stored 0.5, shown 50% -> '50')."""
    import pandas as pd

    cells, file, probs = read_sheet_cells(path, sheet, fallback=True)
    if cells is None:
        return None, probs
    width = max((len(r) for r in cells), default=0)
    grid = [r + [""] * (width - len(r)) for r in cells]
    first = next((i for i, r in enumerate(grid) if any(v != "" for v in r)), None)
    if first is None:
        return None, probs + [
            problem(
                file,
                "empty-file",
                "sheet is empty",
                "put the table on the first sheet, header in row 1",
            )
        ]
    header = [nfc((h if isinstance(h, str) else number_text(h)).strip()) for h in grid[first]]
    body_cells = grid[first + 1 :]
    for i, h in enumerate(header):
        if not h:
            header[i] = f"unnamed_{i + 1}"
            if any(r[i] != "" for r in body_cells):
                probs.append(
                    problem(
                        file,
                        "column-name",
                        f"column {i + 1} has no header (a merged header cell?)",
                        "give every column its own header cell",
                        row=first + 1,
                        column=f"#{i + 1}",
                        severity="warning",
                    )
                )
    twice = duplicate_headers(file, header, first + 1, where=column_letter)
    if twice:
        return None, probs + twice
    _percent_as_shown(header, body_cells)
    body = pd.DataFrame(
        [[v if isinstance(v, str) else number_text(v) for v in r] for r in body_cells],
        columns=header,
        dtype=object,
    )
    keep = [not (h.startswith("unnamed_") and (body[h] == "").all()) for h in header]
    body = body.loc[:, keep]
    rows = list(range(first + 2, first + 2 + len(body)))
    table, probs = finish_table(file, body, rows, probs)
    positions = [i for i, k in enumerate(keep) if k]
    table.letters = {
        str(c): column_letter(i) for c, i in zip(table.frame.columns, positions, strict=True)
    }
    return table, probs


class Percent(float):
    """A number cell of a workbook shown as a percentage: the float is the number stored
    (0.5), which the sheet shows as 50%."""

    def shown(self) -> str:
        """The number the sheet shows before its % sign, as text (``'50'`` for 0.5)."""
        from decimal import Decimal

        return format((Decimal(repr(float(self))) * 100).normalize(), "f")


def is_percent_format(number_format: str | None) -> bool:
    """True when a cell's number format shows the value times 100 with a % sign (``0%``,
    ``0.0%``; ECMA-376 Part 1, 18.8.31); a % inside quotes or after a backslash is a literal
    and does not scale."""
    if not number_format:
        return False
    return "%" in re.sub(r'"[^"]*"|\\.', "", str(number_format))


def is_percent_unit(unit: str) -> bool:
    """True for a unit that is one hundredth of a plain number (``%``, ``percent``)."""
    from comparo.base import units

    try:
        return not units.unit_dimensions(unit) and abs(units.base_factor(unit) - 0.01) < 1e-12
    except Exception:  # a unit pint cannot read is reported by validation
        return False


def _percent_as_shown(header: list[str], body: list[list[Any]]) -> None:
    """In place: :class:`Percent` cells of ``value`` and ``uncertainty`` on rows whose ``unit``
    is a percent, as the sheet shows them (stored 0.5, shown 50% -> '50')."""
    cols = {h.strip().lower(): i for i, h in enumerate(header)}
    targets = [cols[c] for c in ("value", "uncertainty") if c in cols]
    if "unit" not in cols or not targets:
        return
    percent: dict[str, bool] = {}
    for row in body:
        unit = str(row[cols["unit"]]).strip()
        if unit and percent.setdefault(unit, is_percent_unit(unit)):
            for j in targets:
                if isinstance(row[j], Percent):
                    row[j] = row[j].shown()


@lru_cache(maxsize=4096)
def column_letter(index: int) -> str:
    """Spreadsheet letters of a 0-based column index (0 -> A, 26 -> AA)."""
    s, i = "", index + 1
    while i:
        i, r = divmod(i - 1, 26)
        s = chr(65 + r) + s
    return s
