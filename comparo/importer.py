"""``comparo import``: a wide table (one row per taxon, one column per trait) to a dataset folder.

The headers are matched by :mod:`comparo.wide`; this module checks what the matching
decided (units against each quantity's kind, one taxon column, every trait with a
source, each spread paired with its trait), turns every filled cell into one
long-format observation, validates the result exactly as ``comparo check`` would
(every problem reported at the wide table's own cell, e.g. ``C7``), and writes the
folder: observations.csv, sources (copied, or stubs needing a citation), taxa.csv
when grouping columns were mapped, and import.toml with every decision made.
"""

from __future__ import annotations

import hashlib
import math
import os
import re
import shutil
import tempfile
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from comparo.catalog import Catalog, load_catalog
from comparo.errors import InputError, Problem, UsageError
from comparo.wide import (
    UNCERTAINTY_ROLES,
    Column,
    Grid,
    apply_map,
    map_text,
    match_headers,
    read_grid,
    read_map,
)

NOT_STATED = "not stated"  # locator written when the wide table gives none
STUB_CITATION = "NEEDS CITATION: source id {sid}, imported from {file}; replace with the full citation"  # check warns (citation-stub)
LONG_COLUMNS = ("obs_id", "taxon", "quantity", "value", "unit", "uncertainty", "uncertainty_kind", "n", "source_id",
                "locator", "basis", "temperature_c", "preparation", "muscle", "notes", "entered_by", "entered_on")
_EMPTY_WORDS = {"na", "n/a", "nan", "n.d.", "nd", "none", "null", "-", "?", "—", "–"}
_PLAIN = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$")
_THOUSANDS_SPACE = re.compile(r"^[-+]?\d{1,3}([ \u00a0\u202f\u2009]\d{3})+([.,]\d+)?$")


@dataclass(frozen=True)
class ImportResult:
    """What an import wrote. Counts are cells and rows of the wide table."""

    folder: str
    rows_read: int
    observations: int
    empty_cells: int
    taxa: int
    sources: int
    stub_sources: list[str]
    columns: list[Column]
    warnings: list[Problem] = field(default_factory=list)
    files: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return {"folder": self.folder, "rows_read": self.rows_read, "observations": self.observations,
                "empty_cells": self.empty_cells, "taxa": self.taxa, "sources": self.sources,
                "stub_sources": self.stub_sources, "columns": [c.to_dict() for c in self.columns],
                "warnings": len(self.warnings), "files": self.files}

    def summary(self) -> str:
        s = (f"{self.folder}: {self.observations} observation(s) from {self.rows_read} row(s) "
             f"({self.empty_cells} empty cell(s), no row), {self.taxa} taxa, {self.sources} source(s); "
             f"wrote {', '.join(self.files)}")
        if self.stub_sources:
            s += f"; {len(self.stub_sources)} source(s) need a citation in sources.csv"
        return s


def map_path_for(output: str | os.PathLike) -> Path:
    """Where a suggested map file is written when headers need a decision: beside the output folder."""
    out = Path(os.path.abspath(os.path.expanduser(str(output))))
    return out.with_name(out.name + "-import-map.csv")


# --------------------------------------------------------------------------- numbers

def parse_cell(v: Any, decimal_comma: bool) -> tuple[str | None, str, str]:
    """A cell as number text (``'12.5'``), or ``None`` with a message and a hint.
    Number cells of a workbook are taken as they are; text is read with '.' as the decimal
    mark, or ',' with *decimal_comma* ('.' or a space then group thousands)."""
    if isinstance(v, float):
        if not math.isfinite(v):
            return None, "not a finite number", ""
        return (str(int(v)) if v.is_integer() and abs(v) < 1e15 else repr(v)), "", ""
    t = str(v).strip()
    if _THOUSANDS_SPACE.match(t):
        t = re.sub(r"[ \u00a0\u202f\u2009]", "", t)
    if decimal_comma:
        if re.fullmatch(r"[-+]?\d{1,3}(\.\d{3})+(,\d+)?([eE][-+]?\d+)?", t):
            t = t.replace(".", "")
        elif "." in t:
            return None, "a number with '.' in a table read with decimal commas", "write the number with ',' as the decimal mark, as the rest of the table"
        t = t.replace(",", ".", 1) if t.count(",") == 1 else t
    if not _PLAIN.match(t):
        return None, "not a number", _hint(t, decimal_comma)
    x = float(t)
    if math.isinf(x):
        return None, "beyond the range of a double", "a mistyped exponent?"
    if x == 0 and re.search(r"[1-9]", t.split("e")[0].split("E")[0]):
        return None, "below the smallest number a double holds (it would read as 0)", "a mistyped exponent?"
    return t, "", ""


def _hint(t: str, decimal_comma: bool) -> str:
    if not decimal_comma and re.fullmatch(r"[-+]?\d+,\d+", t):
        return "a decimal comma? rerun with --decimal-comma if the whole table uses them, or write '.'"
    if not decimal_comma and re.fullmatch(r"[-+]?\d{1,3}(,\d{3})+(\.\d+)?", t):
        return "a ',' between thousands? remove it"
    if t[:1] in "<>≤≥~":
        return "a bound or approximate value is not a number: put the number in the cell and the qualifier in a notes column"
    if "±" in t or "+/-" in t:
        return "put the spread in its own column, e.g. 'Body mass SD (g)'"
    if re.match(r"^[-+]?\d[\d.,]*\s*[A-Za-zµμ%°]", t):
        return "a unit typed into the cell? the unit belongs in the header, e.g. 'Body mass (g)'"
    return "give a plain number (empty cells make no row)"


# --------------------------------------------------------------------------- column decisions

def _header_problem(grid: Grid, c: Column, rule: str, message: str, hint: str = "") -> Problem:
    return Problem("error", grid.file, grid.header_row, c.header, c.header, rule, f"header in column {c.letter}: {message}", hint)


def resolve(grid: Grid, columns: list[Column], catalog: Catalog) -> tuple[list[Column], list[Problem]]:
    """Check the decisions: every header resolved, units readable and of the quantity's
    kind, exactly one taxon column, at most one global source/locator/temperature/n column,
    spreads and per-trait columns paired with exactly one trait column, a source for every trait."""
    from comparo import units

    probs: list[Problem] = []
    out: list[Column] = []
    for c in columns:
        if not c.role:
            cands = ", ".join(f"{k} ({catalog[k].label})" if k in catalog else k for k in c.candidates)
            probs.append(_header_problem(grid, c, "header-ambiguous" if c.problem.startswith("ambiguous") else "header-unknown",
                                         c.problem + (f"; closest: {cands}" if cands else ""), "set its role (and key, unit) in the map file"))
            out.append(c)
            continue
        if c.role in ("value", *UNCERTAINTY_ROLES):
            kind = catalog[c.key].kind
            if not c.unit and c.role == "value":
                probs.append(_header_problem(grid, c, "header-unit", f"{c.key} needs a unit in the header, e.g. '{c.header} ({catalog[c.key].unit})'", "write the unit in parentheses or brackets, or in the map file"))
            elif c.unit:
                try:
                    ok = units.measures(c.unit, kind)
                except units.UnitParseError as exc:
                    probs.append(_header_problem(grid, c, "header-unit", str(exc), "write a unit pint reads: um, µm, mg, kPa, 1/s, Hz ..."))
                    ok = True
                if not ok:
                    probs.append(_header_problem(grid, c, "header-unit-kind", f"unit {c.unit!r} does not measure a {kind} ({c.key} is in {catalog[c.key].unit})"))
        elif c.role == "temperature":
            try:
                ok = bool(c.unit) and units.measures(c.unit, "temperature")
            except units.UnitParseError:
                ok = False
            if not ok:
                probs.append(_header_problem(grid, c, "header-unit", f"a temperature column needs a temperature unit (got {c.unit or 'none'!r})", "write 'Temperature (°C)' or 'Temperature (K)'"))
        out.append(c)
    probs += _structure(grid, out)
    return out, probs


def _structure(grid: Grid, columns: list[Column]) -> list[Problem]:
    probs: list[Problem] = []
    values: dict[str, list[Column]] = {}
    for c in columns:
        if c.role == "value":
            values.setdefault(c.key, []).append(c)

    def file_problem(rule: str, message: str, hint: str = "") -> None:
        probs.append(Problem("error", grid.file, grid.header_row, None, None, rule, message, hint))

    if not values:
        file_problem("no-trait-column", "no column holds a catalogue quantity", "headers such as 'Body mass (g)'; 'comparo units' lists the quantities")
    for key, cols in values.items():
        auto = [c for c in cols if c.how != "map file"]
        if len(cols) > 1 and auto:
            for c in auto:
                probs.append(_header_problem(grid, c, "quantity-twice", f"{len(cols)} columns hold {key}: {', '.join(repr(x.header) for x in cols)}",
                                             "if both are values of it, map each with role 'value' in the map file; else set role 'ignore' for one"))
    for role, what in (("taxon", "taxon (species) names"), ("source", "source ids"), ("locator", "locators"), ("temperature", "temperatures"), ("n", "sample sizes")):
        glob = [c for c in columns if c.role == role and not (role in ("source", "locator", "n") and c.key)]
        if role == "taxon" and not glob:
            file_problem("no-taxon-column", "no column holds the taxon names", "name it 'Species' or 'Taxon', or set role 'taxon' in the map file")
        if len(glob) > 1:
            file_problem("column-twice", f"{len(glob)} columns hold {what}: {', '.join(repr(c.header) for c in glob)}", "keep one, or set role 'ignore' for the others in the map file")
    paired: dict[tuple[str, str], list[Column]] = {}
    for c in columns:
        if c.role in (*UNCERTAINTY_ROLES, "n", "source", "locator") and c.key:
            group = "spread" if c.role in UNCERTAINTY_ROLES else c.role
            paired.setdefault((group, c.key), []).append(c)
            if c.key not in values:
                probs.append(_header_problem(grid, c, "unpaired-column", f"belongs to {c.key}, but no column holds {c.key} values"))
            elif len(values[c.key]) > 1:
                probs.append(_header_problem(grid, c, "unpaired-column", f"belongs to {c.key}, which {len(values[c.key])} columns hold: which one?", "map the extra value columns to 'ignore', or import them separately"))
    for (group, key), cols in paired.items():
        if len(cols) > 1:
            probs.append(_header_problem(grid, cols[1], "column-twice", f"{len(cols)} {group} columns for {key}: {', '.join(repr(c.header) for c in cols)}", "a long-format row holds one; set role 'ignore' for the others in the map file"))
    has_global_source = any(c.role == "source" and not c.key for c in columns)
    for key, cols in values.items():
        if not has_global_source and ("source", key) not in paired:
            for c in cols:
                probs.append(_header_problem(grid, c, "no-source-column", f"no column gives the source of {key}", "add a 'Source' column (or one per trait: 'Body mass source')"))
    return probs


# --------------------------------------------------------------------------- cells to rows

@dataclass
class _Long:
    records: list[dict[str, str]] = field(default_factory=list)
    origin: list[dict[str, tuple[str, str, int]]] = field(default_factory=list)  # per record: long column -> (header, coordinate, row)
    typed: list[dict[str, tuple[str, str]]] = field(default_factory=list)  # per record: long column -> (cell as typed, unit) where converted
    taxa: dict[str, dict[str, str]] = field(default_factory=dict)
    taxa_origin: dict[str, int] = field(default_factory=dict)
    problems: list[Problem] = field(default_factory=list)
    empty: int = 0
    empty_words: dict[str, list[str]] = field(default_factory=dict)
    locator_filled: int = 0


def _number_problem(grid: Grid, c: Column, i: int, v: Any, msg: str, hint: str) -> Problem:
    coord = grid.coordinate(i, c.index)
    return Problem("error", grid.file, grid.row_numbers[i], c.header, str(v)[:60], "not-a-number", f"cell {coord} is {msg}", hint)


def to_long(grid: Grid, columns: list[Column], decimal_comma: bool = False) -> _Long:
    """One long-format record per filled trait cell (see the module docstring)."""
    from comparo import units

    out = _Long()
    by_role: dict[str, list[Column]] = {}
    for c in columns:
        by_role.setdefault(c.role, []).append(c)
    single = {r: next((c for c in by_role.get(r, []) if not c.key), None) for r in ("taxon", "source", "locator", "temperature", "n")}
    per_key = {(c.role, c.key): c for c in columns if c.role in (*UNCERTAINTY_ROLES, "n", "source", "locator") and c.key}

    def text(i: int, c: Column | None) -> str:
        if c is None:
            return ""
        v = grid.rows[i][c.index]
        return (str(int(v)) if isinstance(v, float) and v.is_integer() else repr(v)) if isinstance(v, float) else v

    def number(i: int, c: Column) -> str | None:
        v = grid.rows[i][c.index]
        if isinstance(v, str) and not v:
            return None
        if isinstance(v, str) and v.casefold() in _EMPTY_WORDS:
            out.empty_words.setdefault(c.header, []).append(grid.coordinate(i, c.index))
            return None
        t, msg, hint = parse_cell(v, decimal_comma)
        if t is None:
            out.problems.append(_number_problem(grid, c, i, v, msg, hint))
        return t

    seen: dict[str, int] = {}
    for i, rownum in enumerate(grid.row_numbers):
        taxon = text(i, single["taxon"])
        temp = number(i, single["temperature"]) if single["temperature"] else None
        if temp is not None:
            t_unit = units.parse_unit(single["temperature"].unit).units
            temp = f"{units.registry().Quantity(float(temp), t_unit).to('degC').magnitude:.12g}"  # pint converts offsets
        n_all = number(i, single["n"]) if single["n"] else None
        copies = {c.key: text(i, c) for c in by_role.get("column", [])}
        for c in by_role.get("taxa", []):
            val = text(i, c)
            if taxon and val:
                have = out.taxa.setdefault(taxon, {})
                if have.get(c.key, val) != val:
                    out.problems.append(Problem("error", grid.file, rownum, c.header, val, "taxa-conflict", f"cell {grid.coordinate(i, c.index)}: {taxon!r} has {c.key} {have[c.key]!r} in an earlier row", "one value per taxon"))
                have.setdefault(c.key, val)
                out.taxa_origin.setdefault(taxon, rownum)
        for c in by_role.get("value", []):
            value = number(i, c)
            if value is None:
                out.empty += 1 if isinstance(grid.rows[i][c.index], str) and not grid.rows[i][c.index] else 0
                continue
            coord = grid.coordinate(i, c.index)
            origin = {"value": (c.header, coord, rownum), "quantity": (c.header, coord, rownum), "unit": (c.header, coord, rownum)}
            if not taxon:
                tc = single["taxon"]
                if tc is not None:
                    out.problems.append(Problem("error", grid.file, rownum, tc.header, "", "taxon-missing", f"cell {grid.coordinate(i, tc.index)} is empty, but {coord} holds a value", "give the taxon name"))
                continue
            rec = {"taxon": taxon, "quantity": c.key, "value": value, "unit": c.unit, "basis": copies.get("basis") or c.basis or "reported"}
            # a trait's own source or locator column; where its cell is empty, the row's
            src_col = _filled(per_key.get(("source", c.key)), single["source"], lambda col, i=i: text(i, col))
            loc_col = _filled(per_key.get(("locator", c.key)), single["locator"], lambda col, i=i: text(i, col))
            rec["source_id"] = text(i, src_col)
            if not rec["source_id"] and src_col is not None:
                out.problems.append(Problem("error", grid.file, rownum, src_col.header, "", "source-missing", f"cell {grid.coordinate(i, src_col.index)} is empty, but {coord} holds a value", "give the source id of the value"))
            rec["locator"] = text(i, loc_col) or NOT_STATED
            out.locator_filled += rec["locator"] == NOT_STATED
            for col, src in (("source_id", src_col), ("locator", loc_col), ("taxon", single["taxon"])):
                if src is not None:
                    origin[col] = (src.header, grid.coordinate(i, src.index), rownum)
            spread = next((per_key[(r, c.key)] for r in UNCERTAINTY_ROLES if (r, c.key) in per_key), None)
            if spread is not None:
                u = number(i, spread)
                if u is not None:
                    if spread.unit and spread.unit != c.unit:
                        u = f"{float(u) * units.conversion_factor(spread.unit, c.unit):.15g}"
                    rec["uncertainty"], rec["uncertainty_kind"] = u, spread.role
                    origin["uncertainty"] = (spread.header, grid.coordinate(i, spread.index), rownum)
            own_n = per_key.get(("n", c.key))
            n, n_col = (number(i, own_n), own_n) if own_n is not None else (n_all, single["n"])
            if n is not None:
                rec["n"] = n
                origin["n"] = (n_col.header, grid.coordinate(i, n_col.index), rownum)
            typed: dict[str, tuple[str, str]] = {}
            if temp is not None:
                rec["temperature_c"] = temp
                origin["temperature_c"] = (single["temperature"].header, grid.coordinate(i, single["temperature"].index), rownum)
                typed["temperature_c"] = (text(i, single["temperature"]), single["temperature"].unit)
            for k, v in copies.items():
                if k != "basis" and v:
                    rec[k] = v
            note = f"imported from {grid.file} cell {coord}"
            rec["notes"] = f"{note}; {copies['notes']}" if copies.get("notes") else note
            base = "|".join((taxon, rec["source_id"], rec["locator"], c.header, copies.get("muscle", "")))
            seen[base] = seen.get(base, 0) + 1
            digest = hashlib.sha256(f"{base}|{seen[base]}".encode()).hexdigest()[:10]
            rec["obs_id"] = f"imp_{digest}"
            out.records.append(rec)
            out.origin.append(origin)
            out.typed.append(typed)
    return out


def _filled(own: Column | None, row: Column | None, text) -> Column | None:
    """The trait's own column when its cell is filled (or there is no row column), else the row's."""
    if own is None or (row is not None and not text(own)):
        return row
    return own


# --------------------------------------------------------------------------- validation, in memory

def _frame(records: list[dict[str, str]], columns: list[str]):
    import pandas as pd

    return pd.DataFrame([{c: r.get(c, "") for c in columns} for r in records], columns=columns).astype(str)


def _validate(long: _Long, obs, sources_table, taxa, grid: Grid, folder: Path) -> list[Problem]:
    """Validate the long tables as ``comparo check`` does; problems at the wide cells."""
    from comparo.io import RawDataset, RawTable
    from comparo.validate import validate

    raw = RawDataset(folder=folder)
    raw.observations = RawTable("observations.csv", obs.copy(), list(range(2, len(obs) + 2)))
    raw.sources = sources_table
    if taxa is not None:
        raw.taxa = RawTable("taxa.csv", taxa.copy(), list(range(2, len(taxa) + 2)))
    _, problems = validate(raw)
    out = []
    first_row = list(long.taxa_origin.values())
    for p in problems:
        if p.file == "observations.csv" and p.row is not None:
            origin = long.origin[p.row - 2]
            header, coord, row = origin.get(p.column or "", origin["value"])
            message = f"cell {coord}: {p.message}"
            typed, unit = long.typed[p.row - 2].get(p.column or "", (None, ""))
            if typed is not None and p.value is not None:  # show the cell as typed, not as converted
                if not _same_number(typed, p.value):
                    message += f" (typed {typed} {unit}, read as {p.value} °C)"
                p = replace(p, value=typed)
            out.append(replace(p, file=grid.file, row=row, column=header, message=message))
        elif p.file == "taxa.csv" and p.row is not None and p.row - 2 < len(first_row):
            out.append(replace(p, file=grid.file, row=first_row[p.row - 2], message=f"taxa: {p.message}"))
        else:
            out.append(p)
    # a cell shared by several long rows (a temperature, a source) breaks a rule once, not once per row
    return list(dict.fromkeys(out))


def _same_number(a: str, b: str) -> bool:
    try:
        return float(a) == float(b)
    except ValueError:
        return a == b


# --------------------------------------------------------------------------- sources, taxa, import.toml

def _sources(sources: Path | None, ids: list[str], grid: Grid):
    """(RawTable, file name to write, bytes or None for stubs, stub ids, problems)."""
    import pandas as pd

    from comparo.io import RawTable, read_bibtex, read_table

    if sources is None:
        stubs = sorted({i for i in ids if i})
        frame = pd.DataFrame({"source_id": stubs, "citation": [STUB_CITATION.format(sid=s, file=grid.file) for s in stubs],
                              "year": "", "doi": "", "url": "", "notes": "stub written by comparo import"}).astype(str)
        return RawTable("sources.csv", frame, list(range(2, len(frame) + 2))), "sources.csv", None, stubs, []
    if not sources.is_file():
        return None, "", None, [], [Problem("error", str(sources), None, None, None, "missing-file", "the sources file does not exist or is not a file")]
    ext = sources.suffix.lower()
    if ext not in (".csv", ".tsv", ".bib", ".xlsx"):
        return None, "", None, [], [Problem("error", sources.name, None, None, None, "file-format", "a sources file is .csv, .tsv, .bib or .xlsx")]
    table, probs = read_bibtex(sources) if ext == ".bib" else read_table(sources, "sources")
    return table, f"sources{ext}", sources.read_bytes(), [], probs


def _taxa_frame(long: _Long, columns: list[Column]):
    import pandas as pd

    keys = [c.key for c in columns if c.role == "taxa"]
    if not keys or not long.taxa:
        return None
    names = list(dict.fromkeys(r["taxon"] for r in long.records))
    names += [t for t in long.taxa if t not in names]
    return pd.DataFrame([{"taxon": t, **{k: long.taxa.get(t, {}).get(k, "") for k in keys}} for t in names], columns=["taxon", *keys]).astype(str)


def _toml_value(v: Any) -> str:
    import json

    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(v)
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return json.dumps(str(v), ensure_ascii=False)


def import_toml(grid: Grid, wide: Path, sheet: str | None, decimal_comma: bool, sources: Path | None, columns: list[Column], counts: dict[str, Any]) -> str:
    """import.toml: the input (name, sheet, SHA-256), the options, the counts, and per column
    the decision taken (role, key, unit, basis and how the header was matched)."""
    from comparo import __version__

    lines = ["# Written by 'comparo import': every decision that turned the wide table into this folder.",
             "# Rerun the same import with:  comparo import WIDE -o NEW_FOLDER --map import.toml",
             "# (edit role/key/unit/basis of a [[columns]] entry to change a decision).",
             f"comparo_version = {_toml_value(__version__)}", "", "[input]",
             f"file = {_toml_value(wide.name)}", f"sheet = {_toml_value(sheet or '')}",
             f"sha256 = {_toml_value(hashlib.sha256(wide.read_bytes()).hexdigest())}",
             f"decimal_comma = {_toml_value(decimal_comma)}", f"delimiter = {_toml_value(grid.delimiter)}",
             f"sources = {_toml_value(sources.name if sources else '')}", "", "[defaults]",
             'basis = "reported"', f"locator = {_toml_value(NOT_STATED)}",
             "obs_id = \"imp_ + first 10 hex digits of SHA-256(taxon|source|locator|header|muscle|occurrence)\"", "", "[counts]"]
    lines += [f"{k} = {_toml_value(v)}" for k, v in counts.items()]
    for c in columns:
        lines += ["", "[[columns]]"] + [f"{k} = {_toml_value(v)}" for k, v in c.to_dict().items()]
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- the import

def _decide(grid: Grid, catalog: Catalog, map_file: Path | None) -> tuple[list[Column], list[Problem]]:
    columns = match_headers(grid.header, catalog)
    probs: list[Problem] = []
    if map_file is not None:
        mapping, probs = read_map(map_file)
        columns, more = apply_map(columns, mapping, catalog, map_file.name)
        probs += more
    columns, more = resolve(grid, columns, catalog)
    return columns, probs + more


def _suggest_map(columns: list[Column], output: str, avoid: list[Path | None]) -> str:
    """Write the ready-to-edit map file beside the output; the hint naming it ('' if not written)."""
    from comparo.outputs import atomic_write_text

    path = map_path_for(output)
    if any(a is not None and os.path.realpath(a) == os.path.realpath(path) for a in avoid):
        return ""
    try:
        atomic_write_text(path, map_text(columns))
    except UsageError:
        return ""
    return f"a map file with every column's decision is written to {path}: fill role (and key, unit) of the rows with an empty role, then rerun with --map {path}"


def import_wide(wide: str | os.PathLike, output: str | os.PathLike, *, sources: str | os.PathLike | None = None,
                map_file: str | os.PathLike | None = None, sheet: str | None = None, decimal_comma: bool = False,
                overwrite: bool = False, catalog: Catalog | None = None) -> ImportResult:
    """Import the wide table *wide* into a new dataset folder *output*.

    Raises
    ------
    InputError
        With every problem (at the wide table's cells) when the table cannot be imported
        cleanly; nothing is written then, except a suggested map file beside *output* when
        headers need a decision.
    UsageError
        When *output* exists and is not empty (unless *overwrite*).
    """

    from comparo.outputs import is_stdout

    if is_stdout(output):
        raise UsageError("comparo import writes a dataset folder: give its path with -o FOLDER (not standard output)")
    wide, out = Path(wide), Path(output)
    src = Path(sources) if sources else None
    mp = Path(map_file) if map_file else None
    catalog = catalog or load_catalog()
    if out.is_dir() and any(out.iterdir()) and not overwrite:
        raise UsageError(f"output folder {output} exists and is not empty; comparo import writes a new dataset folder: "
                         "give a new folder, or --overwrite to replace the tables it writes there")
    grid, problems = read_grid(wide, sheet, decimal_comma)
    if grid is None or any(p.severity == "error" for p in problems):
        raise InputError(problems)
    columns, more = _decide(grid, catalog, mp)
    if more:
        written = _suggest_map(columns, str(output), [mp, wide, src])
        if written:
            more.append(Problem("note", grid.file, None, None, None, "map-file-written", written))
        raise InputError(more)
    long = to_long(grid, columns, decimal_comma)
    src_table, src_name, src_bytes, stubs, sprobs = _sources(src, [r["source_id"] for r in long.records], grid)
    problems = long.problems + sprobs
    if not long.records and not problems:
        problems.append(Problem("error", grid.file, None, None, None, "no-values", f"no trait cell holds a value ({len(grid.rows)} data row(s))", "fill the trait columns, one row per taxon"))
    if problems or src_table is None:
        raise InputError(problems)
    extra = [c for c in LONG_COLUMNS[12:] if any(c in r for r in long.records)]
    obs = _frame(long.records, list(LONG_COLUMNS[:12]) + extra)
    taxa = _taxa_frame(long, columns)
    found = _validate(long, obs, src_table, taxa, grid, out)
    if any(p.severity == "error" for p in found):
        raise InputError(found)
    warnings = [p for p in found if p.severity != "error" and p.rule != "citation-stub"]  # the summary counts the stubs
    for header, cells in long.empty_words.items():
        warnings.append(Problem("warning", grid.file, None, header, None, "missing-word", f"{len(cells)} cell(s) say the value is missing ({', '.join(cells[:5])}{' ...' if len(cells) > 5 else ''}); no row made", "nothing to do if they are missing values"))
    if long.locator_filled:
        warnings.append(Problem("warning", grid.file, None, None, None, "locator-not-stated", f"{long.locator_filled} value(s) without a locator: written as {NOT_STATED!r}", "add a Table/Figure/Page column to say where in each source the number is"))
    counts = {"rows_read": len(grid.rows), "observations": len(obs), "empty_cells": long.empty,
              "missing_word_cells": sum(len(v) for v in long.empty_words.values()), "taxa": int(obs["taxon"].nunique()) if len(obs) else 0,
              "sources": len(src_table), "stub_sources": stubs, "locator_not_stated": long.locator_filled}
    files = {"observations.csv": _csv(obs), src_name: src_bytes if src_bytes is not None else _csv(src_table.frame)}
    if taxa is not None:
        files["taxa.csv"] = _csv(taxa)
    files["import.toml"] = import_toml(grid, wide, sheet, decimal_comma, src, columns, counts).encode("utf-8")
    _write_folder(out, files, overwrite)
    return ImportResult(str(output), len(grid.rows), len(obs), long.empty, counts["taxa"], len(src_table), stubs,
                        columns, warnings, list(files))


def _csv(frame) -> bytes:
    from comparo.csvsafe import to_csv

    return to_csv(frame).encode("utf-8")


def _write_folder(out: Path, files: dict[str, bytes], overwrite: bool) -> None:
    """A new folder appears whole (written beside it, then renamed); into an existing one each
    file is replaced atomically, and the tables of an earlier import it does not write again
    (observations.*, sources.*, taxa.*) are removed."""
    from comparo.io import OBSERVATION_NAMES, SOURCE_NAMES, TAXA_NAMES
    from comparo.outputs import _write_error, atomic_write_bytes

    try:
        if not out.exists():
            out.parent.mkdir(parents=True, exist_ok=True)
            tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.", dir=out.parent))
            try:
                for name, data in files.items():
                    (tmp / name).write_bytes(data)
                os.chmod(tmp, 0o777 & ~_umask())
                os.rename(tmp, out)
            except BaseException:
                shutil.rmtree(tmp, ignore_errors=True)
                raise
            return
        for name, data in files.items():
            atomic_write_bytes(out / name, data)
        if overwrite:
            for name in (*OBSERVATION_NAMES, *SOURCE_NAMES, *TAXA_NAMES):
                if name not in files and (out / name).is_file():
                    (out / name).unlink()
    except OSError as exc:
        raise _write_error(out, exc) from None


def _umask() -> int:
    m = os.umask(0)
    os.umask(m)
    return m
