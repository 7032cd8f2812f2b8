"""``comparo import``: a wide table (one row per taxon, one column per trait) to a dataset folder.

The headers are matched by :mod:`comparo.reading.sheets`; this module checks what the matching
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
import shlex
import shutil
import tempfile
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from comparo.base.catalog import Catalog, load_catalog
from comparo.base.errors import InputError, Problem, UsageError
from comparo.reading.sheets import (
    UNCERTAINTY_ROLES,
    Column,
    Grid,
    apply_map,
    map_text,
    match_headers,
    read_grid,
    read_map,
    read_synonyms,
    split_unit,
)
from comparo.reading.tables import Percent, is_percent_unit

NOT_STATED = "not stated"  # locator written when the wide table gives none
# check warns (citation-stub)
STUB_CITATION = (
    "NEEDS CITATION: source id {sid}, imported from {file}; replace with the full citation"
)
LONG_COLUMNS = (
    "obs_id",
    "taxon",
    "quantity",
    "value",
    "unit",
    "uncertainty",
    "uncertainty_kind",
    "n",
    "source_id",
    "locator",
    "basis",
    "temperature_c",
    "preparation",
    "muscle",
    "notes",
    "entered_by",
    "entered_on",
    "q10",
)
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
        return {
            "folder": self.folder,
            "rows_read": self.rows_read,
            "observations": self.observations,
            "empty_cells": self.empty_cells,
            "taxa": self.taxa,
            "sources": self.sources,
            "stub_sources": self.stub_sources,
            "columns": [c.to_dict() for c in self.columns],
            "warnings": len(self.warnings),
            "files": self.files,
        }

    def summary(self) -> str:
        s = (
            f"{self.folder}: {self.observations} observation(s) from {self.rows_read} row(s) "
            f"({self.empty_cells} empty cell(s), no row), {self.taxa} taxa, {self.sources} "
            "source(s); "
            f"wrote {', '.join(self.files)}"
        )
        if self.stub_sources:
            s += f"; {len(self.stub_sources)} source(s) need a citation in sources.csv"
        return s


def map_path_for(output: str | os.PathLike) -> Path:
    """Where a suggested map file is written when headers need a decision: beside the output
    folder."""
    out = Path(os.path.abspath(os.path.expanduser(str(output))))
    return out.with_name(out.name + "-import-map.csv")


# --------------------------------------------------------------------------- numbers


def _percent_scale(unit: str | None) -> int | None:
    """How a percent-formatted cell reads under *unit*: 100 (the number shown, 50 for a
    stored 0.5) under a % unit, 1 (the number stored) under a dimensionless one, None under
    any other unit."""
    from comparo.base import units

    if is_percent_unit(unit or "1"):
        return 100
    try:
        return None if units.unit_dimensions(unit or "1") else 1
    except Exception:  # a unit pint cannot read is reported by the header checks
        return None


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
            return (
                None,
                "a number with '.' in a table read with decimal commas",
                "write the number with ',' as the decimal mark, as the rest of the table",
            )
        t = t.replace(",", ".", 1) if t.count(",") == 1 else t
    if not _PLAIN.match(t):
        return None, "not a number", _hint(t, decimal_comma)
    x = float(t)
    if math.isinf(x):
        return None, "beyond the range of a double", "a mistyped exponent?"
    if x == 0 and re.search(r"[1-9]", t.split("e")[0].split("E")[0]):
        return (
            None,
            "below the smallest number a double holds (it would read as 0)",
            "a mistyped exponent?",
        )
    return t, "", ""


PLUS_MINUS_KINDS = ("sd", "se", "ci95", "range_half")
_PLUS_MINUS = re.compile(
    r"^\s*(?P<value>[^±+]*?\S)\s*(?:±|\+\s*/\s*[-−]|\+\s*[-−])\s*(?P<spread>\S.*?)\s*$"
)


def split_plus_minus(v: Any) -> tuple[str, str] | None:
    """``'12.5 ± 0.3'`` (also ``+/-``, ``+-``) -> ``('12.5', '0.3')``; None for any other cell."""
    if not isinstance(v, str):
        return None
    m = _PLUS_MINUS.match(v)
    return (m.group("value"), m.group("spread")) if m else None


_SPREAD_EXAMPLE = "'Body mass SD (g)'"


def _hint(t: str, decimal_comma: bool) -> str:
    if not decimal_comma and re.fullmatch(r"[-+]?\d+,\d+", t):
        return (
            "a decimal comma? rerun with --decimal-comma if the whole table uses them, or write '.'"
        )
    if not decimal_comma and re.fullmatch(r"[-+]?\d{1,3}(,\d{3})+(\.\d+)?", t):
        return "a ',' between thousands? remove it"
    if t[:1] in "<>≤≥~":
        return (
            "a bound or approximate value is not a number: put the number in the cell and the "
            "qualifier in a notes column"
        )
    if split_plus_minus(t) is not None:
        return (
            "a value with its spread: rerun with --plus-minus KIND (sd, se, ci95 or range_half: "
            "what the ± "
            "means in the source) to split such cells, or put the spread in its own column, e.g. "
            + _SPREAD_EXAMPLE
        )
    if re.match(r"^[-+]?\d[\d.,]*\s*[A-Za-zµμ%°]", t):
        return "a unit typed into the cell? the unit belongs in the header, e.g. 'Body mass (g)'"
    return "give a plain number (empty cells make no row)"


# --------------------------------------------------------------------------- column decisions


def _header_problem(grid: Grid, c: Column, rule: str, message: str, hint: str = "") -> Problem:
    return Problem(
        "error",
        grid.file,
        grid.header_row,
        c.header,
        c.header,
        rule,
        f"header in column {c.letter}: {message}",
        hint,
    )


def resolve(
    grid: Grid, columns: list[Column], catalog: Catalog
) -> tuple[list[Column], list[Problem]]:
    """Check the decisions: every header resolved, units readable and of the quantity's
    kind, exactly one taxon column, at most one global source/locator/temperature/n column,
    spreads and per-trait columns paired with exactly one trait column, a source for every trait."""
    from comparo.base import units

    probs: list[Problem] = []
    out: list[Column] = []
    for c in columns:
        if not c.role:
            cands = ", ".join(
                f"{k} ({catalog[k].label})" if k in catalog else k for k in c.candidates
            )
            why = c.problem or (
                "the map file gives it no role" if c.how == "map file" else "no role decided"
            )
            probs.append(
                _header_problem(
                    grid,
                    c,
                    "header-ambiguous" if c.problem.startswith("ambiguous") else "header-unknown",
                    why + (f"; closest: {cands}" if cands else ""),
                    "set its role (and key, unit) in the map file",
                )
            )
            out.append(c)
            continue
        if c.role in ("value", *UNCERTAINTY_ROLES):
            kind = catalog[c.key].kind
            if not c.unit and c.role == "value":
                probs.append(
                    _header_problem(
                        grid,
                        c,
                        "header-unit",
                        f"{c.key} needs a unit in the header, e.g. '{c.header} "
                        f"({catalog[c.key].unit})'",
                        "write the unit in parentheses or brackets, or in the map file",
                    )
                )
            elif c.unit:
                try:
                    ok = units.measures(c.unit, kind)
                except units.UnitParseError as exc:
                    probs.append(
                        _header_problem(
                            grid,
                            c,
                            "header-unit",
                            str(exc),
                            "write a unit pint reads: um, µm, mg, kPa, 1/s, Hz ...",
                        )
                    )
                    ok = True
                if not ok:
                    probs.append(
                        _header_problem(
                            grid,
                            c,
                            "header-unit-kind",
                            f"unit {c.unit!r} does not measure a {kind} ({c.key} is in "
                            f"{catalog[c.key].unit})",
                        )
                    )
        elif c.role == "temperature":
            try:
                ok = bool(c.unit) and units.measures(c.unit, "temperature")
            except units.UnitParseError:
                ok = False
            if not ok:
                probs.append(
                    _header_problem(
                        grid,
                        c,
                        "header-unit",
                        f"a temperature column needs a temperature unit (got {c.unit or 'none'!r})",
                        "write 'Temperature (°C)' or 'Temperature (K)'",
                    )
                )
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
        file_problem(
            "no-trait-column",
            "no column holds a catalogue quantity",
            "headers such as 'Body mass (g)'; 'comparo units' lists the quantities",
        )
    for key, cols in values.items():
        auto = [c for c in cols if c.how != "map file"]
        if len(cols) > 1 and auto:
            for c in auto:
                probs.append(
                    _header_problem(
                        grid,
                        c,
                        "quantity-twice",
                        f"{len(cols)} columns hold {key}: "
                        f"{', '.join(repr(x.header) for x in cols)}",
                        "if both are values of it, map each with role 'value' in the map file; "
                        "else set role 'ignore' for one",
                    )
                )
    for role, what in (
        ("taxon", "taxon (species) names"),
        ("source", "source ids"),
        ("locator", "locators"),
        ("temperature", "temperatures"),
        ("n", "sample sizes"),
    ):
        glob = [
            c
            for c in columns
            if c.role == role and not (role in ("source", "locator", "n") and c.key)
        ]
        if role == "taxon" and not glob:
            file_problem(
                "no-taxon-column",
                "no column holds the taxon names",
                "name it 'Species' or 'Taxon', or set role 'taxon' in the map file",
            )
        if len(glob) > 1:
            file_problem(
                "column-twice",
                f"{len(glob)} columns hold {what}: {', '.join(repr(c.header) for c in glob)}",
                "keep one, or set role 'ignore' for the others in the map file",
            )
    paired: dict[tuple[str, str], list[Column]] = {}
    for c in columns:
        if c.role in (*UNCERTAINTY_ROLES, "n", "source", "locator") and c.key:
            group = "spread" if c.role in UNCERTAINTY_ROLES else c.role
            paired.setdefault((group, c.key), []).append(c)
            if c.key not in values:
                probs.append(
                    _header_problem(
                        grid,
                        c,
                        "unpaired-column",
                        f"belongs to {c.key}, but no column holds {c.key} values",
                    )
                )
            elif len(values[c.key]) > 1:
                probs.append(
                    _header_problem(
                        grid,
                        c,
                        "unpaired-column",
                        f"belongs to {c.key}, which {len(values[c.key])} columns hold: which one?",
                        "map the extra value columns to 'ignore', or import them separately",
                    )
                )
    for (group, key), cols in paired.items():
        if len(cols) > 1:
            probs.append(
                _header_problem(
                    grid,
                    cols[1],
                    "column-twice",
                    f"{len(cols)} {group} columns for {key}: "
                    f"{', '.join(repr(c.header) for c in cols)}",
                    "a long-format row holds one; set role 'ignore' for the others in the map file",
                )
            )
    has_global_source = any(c.role == "source" and not c.key for c in columns)
    for key, cols in values.items():
        if not has_global_source and ("source", key) not in paired:
            for c in cols:
                probs.append(
                    _header_problem(
                        grid,
                        c,
                        "no-source-column",
                        f"no column gives the source of {key}",
                        "add a 'Source' column (or one per trait: 'Body mass source')",
                    )
                )
    return probs


# --------------------------------------------------------------------------- cells to rows


@dataclass
class _Long:
    records: list[dict[str, str]] = field(default_factory=list)
    origin: list[dict[str, tuple[str, str, int]]] = field(
        default_factory=list
    )  # per record: long column -> (header, coordinate, row)
    typed: list[dict[str, tuple[str, str]]] = field(
        default_factory=list
    )  # per record: long column -> (cell as typed, unit) where converted
    taxa: dict[str, dict[str, str]] = field(default_factory=dict)
    taxa_origin: dict[str, int] = field(default_factory=dict)
    problems: list[Problem] = field(default_factory=list)
    empty: int = 0
    empty_words: dict[str, list[str]] = field(default_factory=dict)
    locator_filled: int = 0


def _number_problem(grid: Grid, c: Column, i: int, v: Any, msg: str, hint: str) -> Problem:
    coord = grid.coordinate(i, c.index)
    if hint.endswith(_SPREAD_EXAMPLE):  # the example spread column named after this column
        name, unit = split_unit(c.header)
        hint = hint[: -len(_SPREAD_EXAMPLE)] + f"'{name} SD" + (f" ({unit})'" if unit else "'")
    return Problem(
        "error",
        grid.file,
        grid.row_numbers[i],
        c.header,
        str(v)[:60],
        "not-a-number",
        f"cell {coord} is {msg}",
        hint,
    )


def to_long(
    grid: Grid,
    columns: list[Column],
    decimal_comma: bool = False,
    plus_minus: str | None = None,
    catalog: Catalog | None = None,
) -> _Long:
    """One long-format record per filled trait cell (see the module docstring). With
    *plus_minus* (one of :data:`PLUS_MINUS_KINDS`), a trait cell ``12.5 ± 0.3`` is the value
    12.5 with the uncertainty 0.3 of that kind."""
    from comparo.base import units

    out = _Long()
    cat = catalog if catalog is not None else load_catalog()
    rates = {k for k in cat if cat[k].temperature_sensitive}
    by_role: dict[str, list[Column]] = {}
    for c in columns:
        by_role.setdefault(c.role, []).append(c)
    single = {
        r: next((c for c in by_role.get(r, []) if not c.key), None)
        for r in ("taxon", "source", "locator", "temperature", "n")
    }
    per_key = {
        (c.role, c.key): c
        for c in columns
        if c.role in (*UNCERTAINTY_ROLES, "n", "source", "locator") and c.key
    }

    def text(i: int, c: Column | None) -> str:
        if c is None:
            return ""
        v = grid.rows[i][c.index]
        return (
            (str(int(v)) if isinstance(v, float) and v.is_integer() else repr(v))
            if isinstance(v, float)
            else v
        )

    def number(i: int, c: Column, unit: str | None = None) -> str | None:  # unit: of the trait
        v = grid.rows[i][c.index]
        if isinstance(v, str) and not v:
            return None
        if isinstance(v, str) and v.casefold() in _EMPTY_WORDS:
            out.empty_words.setdefault(c.header, []).append(grid.coordinate(i, c.index))
            return None
        if isinstance(v, Percent) and math.isfinite(v):
            unit = c.unit if unit is None else unit
            scale = _percent_scale(unit)
            if scale is None:
                out.problems.append(
                    _number_problem(
                        grid,
                        c,
                        i,
                        f"{v.shown()}%",
                        f"formatted as a percentage (the sheet shows {v.shown()}%) "
                        f"but the column's unit is {unit!r}",
                        "format the cell as a plain number, or give the header a % unit",
                    )
                )
                return None
            return v.shown() if scale == 100 else parse_cell(float(v), decimal_comma)[0]
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
            # pint converts offsets
            temp = f"{units.registry().Quantity(float(temp), t_unit).to('degC').magnitude:.12g}"
        n_all = number(i, single["n"]) if single["n"] else None
        copies = {c.key: text(i, c) for c in by_role.get("column", [])}
        for c in by_role.get("taxa", []):
            val = text(i, c)
            if taxon and val:
                have = out.taxa.setdefault(taxon, {})
                if have.get(c.key, val) != val:
                    out.problems.append(
                        Problem(
                            "error",
                            grid.file,
                            rownum,
                            c.header,
                            val,
                            "taxa-conflict",
                            f"cell {grid.coordinate(i, c.index)}: {taxon!r} has {c.key} "
                            f"{have[c.key]!r} in an earlier row",
                            "one value per taxon",
                        )
                    )
                have.setdefault(c.key, val)
                out.taxa_origin.setdefault(taxon, rownum)
        for c in by_role.get("value", []):
            pm = split_plus_minus(grid.rows[i][c.index]) if plus_minus else None
            if pm is not None:
                value, pm_spread = _split_cell(grid, c, i, pm, decimal_comma, out.problems)
                if value is None:
                    continue
            else:
                value, pm_spread = number(i, c), None
            if value is None:
                out.empty += (
                    1 if isinstance(grid.rows[i][c.index], str) and not grid.rows[i][c.index] else 0
                )
                continue
            coord = grid.coordinate(i, c.index)
            origin = {
                "value": (c.header, coord, rownum),
                "quantity": (c.header, coord, rownum),
                "unit": (c.header, coord, rownum),
            }
            if not taxon:
                tc = single["taxon"]
                if tc is not None:
                    out.problems.append(
                        Problem(
                            "error",
                            grid.file,
                            rownum,
                            tc.header,
                            "",
                            "taxon-missing",
                            f"cell {grid.coordinate(i, tc.index)} is empty, but {coord} holds a "
                            "value",
                            "give the taxon name",
                        )
                    )
                continue
            rec = {
                "taxon": taxon,
                "quantity": c.key,
                "value": value,
                "unit": c.unit,
                "basis": copies.get("basis") or c.basis or "reported",
            }
            # a trait's own source or locator column; where its cell is empty, the row's
            src_col = _filled(
                per_key.get(("source", c.key)), single["source"], lambda col, i=i: text(i, col)
            )
            loc_col = _filled(
                per_key.get(("locator", c.key)), single["locator"], lambda col, i=i: text(i, col)
            )
            rec["source_id"] = text(i, src_col)
            if not rec["source_id"] and src_col is not None:
                out.problems.append(
                    Problem(
                        "error",
                        grid.file,
                        rownum,
                        src_col.header,
                        "",
                        "source-missing",
                        f"cell {grid.coordinate(i, src_col.index)} is empty, but {coord} holds a "
                        "value",
                        "give the source id of the value",
                    )
                )
            rec["locator"] = text(i, loc_col) or NOT_STATED
            out.locator_filled += rec["locator"] == NOT_STATED
            for col, src in (
                ("source_id", src_col),
                ("locator", loc_col),
                ("taxon", single["taxon"]),
            ):
                if src is not None:
                    origin[col] = (src.header, grid.coordinate(i, src.index), rownum)
            spread = next(
                (per_key[(r, c.key)] for r in UNCERTAINTY_ROLES if (r, c.key) in per_key), None
            )
            if pm_spread is not None:
                rec["uncertainty"], rec["uncertainty_kind"] = pm_spread, plus_minus
                origin["uncertainty"] = origin["value"]
                if spread is not None and text(i, spread):
                    out.problems.append(
                        Problem(
                            "error",
                            grid.file,
                            rownum,
                            spread.header,
                            text(i, spread),
                            "spread-twice",
                            f"cell {coord} gives a spread after ± and cell "
                            f"{grid.coordinate(i, spread.index)} gives one too",
                            "keep one of them",
                        )
                    )
            elif spread is not None:
                u = number(i, spread, spread.unit or c.unit)
                if u is not None:
                    if spread.unit and spread.unit != c.unit:
                        u = f"{float(u) * units.conversion_factor(spread.unit, c.unit):.15g}"
                    rec["uncertainty"], rec["uncertainty_kind"] = u, spread.role
                    origin["uncertainty"] = (
                        spread.header,
                        grid.coordinate(i, spread.index),
                        rownum,
                    )
            own_n = per_key.get(("n", c.key))
            n, n_col = (number(i, own_n), own_n) if own_n is not None else (n_all, single["n"])
            if n is not None:
                rec["n"] = n
                origin["n"] = (n_col.header, grid.coordinate(i, n_col.index), rownum)
            typed: dict[str, tuple[str, str]] = {}
            if temp is not None:
                rec["temperature_c"] = temp
                origin["temperature_c"] = (
                    single["temperature"].header,
                    grid.coordinate(i, single["temperature"].index),
                    rownum,
                )
                typed["temperature_c"] = (
                    text(i, single["temperature"]),
                    single["temperature"].unit,
                )
            for k, v in copies.items():
                if k != "basis" and v and (k != "q10" or c.key in rates):  # Q10: rates only
                    rec[k] = v
            note = f"imported from {grid.file} cell {coord}"
            rec["notes"] = f"{note}; {copies['notes']}" if copies.get("notes") else note
            base = "|".join(
                (taxon, rec["source_id"], rec["locator"], c.header, copies.get("muscle", ""))
            )
            seen[base] = seen.get(base, 0) + 1
            digest = hashlib.sha256(f"{base}|{seen[base]}".encode()).hexdigest()[:10]
            rec["obs_id"] = f"imp_{digest}"
            out.records.append(rec)
            out.origin.append(origin)
            out.typed.append(typed)
    return out


def _split_cell(
    grid: Grid, c: Column, i: int, pm: tuple[str, str], decimal_comma: bool, problems: list[Problem]
) -> tuple[str | None, str | None]:
    """The value and spread texts of a ``12.5 ± 0.3`` cell, or (None, None) with a problem."""
    value, msg, hint = parse_cell(pm[0], decimal_comma)
    spread, smsg, shint = parse_cell(pm[1], decimal_comma)
    if value is None or spread is None:
        part, why, how = (
            ("the value before ±", msg, hint)
            if value is None
            else ("the spread after ±", smsg, shint)
        )
        problems.append(
            _number_problem(
                grid, c, i, grid.rows[i][c.index], f"a value ± spread whose {part} is {why}", how
            )
        )
        return None, None
    return value, spread


def _filled(own: Column | None, row: Column | None, text) -> Column | None:
    """The trait's own column when its cell is filled (or there is no row column), else the
    row's."""
    if own is None or (row is not None and not text(own)):
        return row
    return own


# --------------------------------------------------------------------------- validation, in memory


def _frame(records: list[dict[str, str]], columns: list[str]):
    import pandas as pd

    return pd.DataFrame(
        [{c: r.get(c, "") for c in columns} for r in records], columns=columns
    ).astype(str)


def _validate(long: _Long, obs, sources_table, taxa, grid: Grid, folder: Path) -> list[Problem]:
    """Validate the long tables as ``comparo check`` does; problems at the wide cells.

    Names, keys, units and ids are first read as they look
    (:func:`comparo.reading.tables.clean_names`:
    no-break and zero-width spaces, direction marks), in *obs*, *taxa* and stub sources
    themselves (stub sources are made from ids so read), so the folder written holds the
    names as read."""
    from comparo.reading.tables import RawDataset, RawTable, clean_names
    from comparo.validation.tables import validate

    pre = clean_names("observations.csv", obs, list(range(2, len(obs) + 2)), other_rows=False)
    if taxa is not None:  # its names come from the taxon cells named above
        clean_names("taxa.csv", taxa, list(range(2, len(taxa) + 2)))
    raw = RawDataset(folder=folder)
    raw.observations = RawTable("observations.csv", obs.copy(), list(range(2, len(obs) + 2)))
    raw.sources = sources_table
    if taxa is not None:
        raw.taxa = RawTable("taxa.csv", taxa.copy(), list(range(2, len(taxa) + 2)))
    _, problems = validate(raw)
    problems = pre + list(problems)
    out = []
    first_row = list(long.taxa_origin.values())
    for p in problems:
        if p.file == "observations.csv" and p.row is not None:
            origin = long.origin[p.row - 2]
            header, coord, row = origin.get(p.column or "", origin["value"])
            message = f"cell {coord}: {p.message}"
            typed, unit = long.typed[p.row - 2].get(p.column or "", (None, ""))
            if (
                typed is not None and p.value is not None
            ):  # show the cell as typed, not as converted
                if not _same_number(typed, p.value):
                    message += f" (typed {typed} {unit}, read as {p.value} °C)"
                p = replace(p, value=typed)
            out.append(replace(p, file=grid.file, row=row, column=header, message=message))
        elif p.file == "taxa.csv" and p.row is not None and p.row - 2 < len(first_row):
            out.append(
                replace(p, file=grid.file, row=first_row[p.row - 2], message=f"taxa: {p.message}")
            )
        else:
            out.append(p)
    # a cell shared by several long rows (a temperature, a source) breaks a rule once, not
    # once per row
    return list(dict.fromkeys(out))


def _same_number(a: str, b: str) -> bool:
    try:
        return float(a) == float(b)
    except ValueError:
        return a == b


def column_unit_slips(
    found: list[Problem], long: _Long, columns: list[Column], catalog: Catalog, grid: Grid
) -> list[Problem]:
    """A whole column in the wrong unit is one warning for the column, not one per cell.

    When at least two, and at least half, of a trait column's values are outside the
    quantity's plausible range as read in the header's unit, and another usual unit of the
    kind (``units.USUAL_UNITS``) puts at least 80% of them inside it (and more than the
    header's unit does), the column's out-of-range warnings are replaced by one naming that
    unit. The values are imported as the header says; the curator decides."""
    from comparo.base import units

    by_col: dict[str, list[Problem]] = {}
    for p in found:
        if p.rule == "out-of-range" and p.file == grid.file and p.column:
            by_col.setdefault(p.column, []).append(p)
    replaced: set[str] = set()
    extra: list[Problem] = []
    for c in columns:
        bad = by_col.get(c.header, [])
        q = catalog[c.key] if c.role == "value" and c.key in catalog else None
        if q is None or not q.range or len(bad) < 2:
            continue
        values = [
            float(r["value"])
            for r, o in zip(long.records, long.origin, strict=True)
            if o["value"][0] == c.header
        ]
        if 2 * len(bad) < len(values):
            continue
        lo, hi = q.range
        own = units.conversion_factor(c.unit, q.unit)
        best, best_in = "", len(values) - len(bad)
        for u in units.USUAL_UNITS.get(q.kind, ()):
            try:
                f = units.conversion_factor(u, q.unit)
            except Exception:  # a usual unit of another dimension (never for a catalogue kind)
                continue
            if math.isclose(f, own, rel_tol=1e-9):
                continue
            inside = sum(lo <= v * f <= hi for v in values)
            if inside > best_in:
                best, best_in = u, inside
        if not best or best_in < 0.8 * len(values):
            continue
        replaced.add(c.header)
        canon = units.pretty(q.unit)
        extra.append(
            Problem(
                "warning",
                grid.file,
                grid.header_row,
                c.header,
                c.unit,
                "column-unit",
                f"header in column {c.letter}: {len(bad)} of {len(values)} values of {q.key} are "
                "outside its plausible range "
                f"({lo:g}-{hi:g} {canon}) read in {c.unit}; read in {best}, {best_in} of them are "
                f"inside: is the column's unit {best}?",
                f"if so, write ({best}) in the header (or the unit in the map file) and import "
                f"again; they were imported in {c.unit}",
            )
        )
    return [p for p in found if not (p.rule == "out-of-range" and p.column in replaced)] + extra


# ------------------------------------------------------------- sources, taxa, import.toml


def _sources(sources: Path | None, ids: list[str], grid: Grid):
    """(RawTable, file name to write, bytes or None for stubs, stub ids, problems)."""
    import pandas as pd

    from comparo.reading.tables import RawTable, read_bibtex, read_table

    if sources is None:
        from comparo.reading.tables import visible

        stubs = sorted({visible(i) for i in ids if i})  # ids as read (see _validate)
        frame = pd.DataFrame(
            {
                "source_id": stubs,
                "citation": [STUB_CITATION.format(sid=s, file=grid.file) for s in stubs],
                "year": "",
                "doi": "",
                "url": "",
                "notes": "stub written by comparo import",
            }
        ).astype(str)
        return (
            RawTable("sources.csv", frame, list(range(2, len(frame) + 2))),
            "sources.csv",
            None,
            stubs,
            [],
        )
    if not sources.is_file():
        return (
            None,
            "",
            None,
            [],
            [
                Problem(
                    "error",
                    str(sources),
                    None,
                    None,
                    None,
                    "missing-file",
                    "the sources file does not exist or is not a file",
                )
            ],
        )
    ext = sources.suffix.lower()
    if ext not in (".csv", ".tsv", ".bib", ".xlsx"):
        return (
            None,
            "",
            None,
            [],
            [
                Problem(
                    "error",
                    sources.name,
                    None,
                    None,
                    None,
                    "file-format",
                    "a sources file is .csv, .tsv, .bib or .xlsx",
                )
            ],
        )
    table, probs = read_bibtex(sources) if ext == ".bib" else read_table(sources, "sources")
    return table, f"sources{ext}", sources.read_bytes(), [], probs


def _taxa_frame(long: _Long, columns: list[Column]):
    import pandas as pd

    keys = [c.key for c in columns if c.role == "taxa"]
    if not keys or not long.taxa:
        return None
    names = list(dict.fromkeys(r["taxon"] for r in long.records))
    names += [t for t in long.taxa if t not in names]
    return pd.DataFrame(
        [{"taxon": t, **{k: long.taxa.get(t, {}).get(k, "") for k in keys}} for t in names],
        columns=["taxon", *keys],
    ).astype(str)


def _toml_value(v: Any) -> str:
    import json

    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(v)
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return json.dumps(str(v), ensure_ascii=False)


def import_toml(
    grid: Grid,
    wide: Path,
    sheet: str | None,
    decimal_comma: bool,
    sources: Path | None,
    columns: list[Column],
    counts: dict[str, Any],
    plus_minus: str | None = None,
    written: list[str] | None = None,
) -> str:
    """import.toml: the input (name, sheet, SHA-256), the options, the files written (the only
    ones a later ``--overwrite`` import may remove), the counts, and per column the decision
    taken (role, key, unit, basis and how the header was matched)."""
    from comparo.base.version import __version__

    lines = [
        "# Written by 'comparo import': every decision that turned the wide table into this "
        "folder.",
        "# Rerun the same import with:  comparo import WIDE -o NEW_FOLDER --map import.toml",
        "# (edit role/key/unit/basis of a [[columns]] entry to change a decision).",
        f"comparo_version = {_toml_value(__version__)}",
        "",
        "[input]",
        f"file = {_toml_value(wide.name)}",
        f"sheet = {_toml_value(sheet or '')}",
        f"sha256 = {_toml_value(hashlib.sha256(wide.read_bytes()).hexdigest())}",
        f"decimal_comma = {_toml_value(decimal_comma)}",
        f"delimiter = {_toml_value(grid.delimiter)}",
        f"header_row = {grid.header_row}",
        f"plus_minus = {_toml_value(plus_minus or '')}",
        f"sources = {_toml_value(sources.name if sources else '')}",
        "",
        "[output]",
        f"files = {_toml_value(list(written or []))}",
        "",
        "[defaults]",
        'basis = "reported"',
        f"locator = {_toml_value(NOT_STATED)}",
        'obs_id = "imp_ + first 10 hex digits of '
        'SHA-256(taxon|source|locator|header|muscle|occurrence)"',
        "",
        "[counts]",
    ]
    lines += [f"{k} = {_toml_value(v)}" for k, v in counts.items()]
    for c in columns:
        lines += ["", "[[columns]]"] + [f"{k} = {_toml_value(v)}" for k, v in c.to_dict().items()]
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- the import


def header_synonyms(
    wide: Path, mapping: dict[str, dict[str, str]], catalog: Catalog, map_file: str
) -> tuple[dict[str, str], list[Problem]]:
    """The user's own header synonyms: ``[header_synonyms]`` of a comparo.toml beside the wide
    table, and the rows of role ``synonym`` in the map file (header = the name, key = a catalogue
    key or taxon/source/locator/temperature/n), which win over the file's."""
    from comparo.reading.tables import SETTINGS_NAME, read_settings

    synonyms: dict[str, str] = {}
    probs: list[Problem] = []
    toml = wide.parent / SETTINGS_NAME
    if toml.is_file():
        settings, sprobs = read_settings(toml)
        probs += [p for p in sprobs if p.severity == "error"]
        synonyms, more = read_synonyms(settings.get("header_synonyms"), catalog, SETTINGS_NAME)
        probs += more
    rows = {
        h: rec.get("key", "").strip()
        for h, rec in mapping.items()
        if rec.get("role", "").strip().lower() == "synonym"
    }
    own, more = read_synonyms(rows, catalog, map_file, where="key")
    for p in more:  # at the map row of the name (or of the target) the problem names
        h = next((h for h, k in rows.items() if p.value in (h, k)), None)
        probs.append(replace(p, row=int(mapping[h]["_row"]) if h is not None else None))
    return {**synonyms, **own}, probs


def _decide(
    grid: Grid, catalog: Catalog, map_file: Path | None, wide: Path
) -> tuple[list[Column], list[Problem]]:
    probs: list[Problem] = []
    mapping: dict[str, dict[str, str]] = {}
    if map_file is not None:
        mapping, probs = read_map(map_file)
    synonyms, more = header_synonyms(wide, mapping, catalog, map_file.name if map_file else "")
    probs += more
    columns = match_headers(grid.header, catalog, synonyms)
    if map_file is not None:
        decisions = {
            h: rec for h, rec in mapping.items() if rec.get("role", "").strip().lower() != "synonym"
        }
        columns, more = apply_map(columns, decisions, catalog, map_file.name)
        probs += more
    columns, more = resolve(grid, columns, catalog)
    return columns, probs + more


def _suggest_map(columns: list[Column], output: str) -> str:
    """Write the ready-to-edit map file beside the output; the hint naming it ('' if not written).

    An existing map file (perhaps edited by hand) is never replaced: when it holds other
    text, the suggestion goes to the first free name ``OUT-import-map-2.csv``, ``-3``, ..."""
    from comparo.base.outputs import atomic_write_text

    text = map_text(columns)
    first = path = map_path_for(output)
    for n in range(2, 1000):
        if not os.path.lexists(path):
            break
        if path.is_file() and not path.is_symlink() and _same_text(path, text):
            return (
                f"the map file {path} already holds every column's decision: fill role (and key, "
                "unit) "
                f"of the rows with an empty role, then rerun with --map {shlex.quote(str(path))}"
            )
        path = first.with_name(f"{first.stem}-{n}.csv")
    else:
        return ""
    try:
        atomic_write_text(path, text)
    except UsageError:
        return ""
    kept = f" ({first} exists and is kept as it is)" if path != first else ""
    return (
        f"a map file with every column's decision is written to {path}{kept}: fill role (and key, "
        "unit) "
        f"of the rows with an empty role, then rerun with --map {shlex.quote(str(path))}"
    )


def _same_text(path: Path, text: str) -> bool:
    try:
        return path.stat().st_size < 10_000_000 and path.read_text(encoding="utf-8") == text
    except (OSError, UnicodeDecodeError):
        return False


def import_wide(
    wide: str | os.PathLike,
    output: str | os.PathLike,
    *,
    sources: str | os.PathLike | None = None,
    map_file: str | os.PathLike | None = None,
    sheet: str | None = None,
    decimal_comma: bool = False,
    overwrite: bool = False,
    catalog: Catalog | None = None,
    header_row: int | None = None,
    plus_minus: str | None = None,
) -> ImportResult:
    """Import the wide table *wide* into a new dataset folder *output*.

    *header_row*: the row of the column headers (1-based, as a spreadsheet shows it; rows
    above are ignored); default the first non-blank row. *plus_minus*: what a ``±`` in a
    trait cell means (one of :data:`PLUS_MINUS_KINDS`); cells such as ``12.5 ± 0.3`` are then
    split into value and uncertainty; without it they are refused.

    Raises
    ------
    InputError
        With every problem (at the wide table's cells) when the table cannot be imported
        cleanly; nothing is written then, except a suggested map file beside *output* when
        headers need a decision.
    UsageError
        When *output* exists and is not empty (unless *overwrite*).
    """

    from comparo.base.outputs import is_stdout, protecting

    if is_stdout(output):
        raise UsageError(
            "comparo import writes a dataset folder: give its path with -o FOLDER (not standard "
            "output)"
        )
    with protecting([wide, sources, map_file]):
        return _import(
            Path(wide),
            Path(output),
            Path(sources) if sources else None,
            Path(map_file) if map_file else None,
            sheet,
            decimal_comma,
            overwrite,
            catalog,
            header_row,
            plus_minus,
        )


def _import(
    wide: Path,
    out: Path,
    src: Path | None,
    mp: Path | None,
    sheet: str | None,
    decimal_comma: bool,
    overwrite: bool,
    catalog: Catalog | None,
    header_row: int | None,
    plus_minus: str | None,
) -> ImportResult:
    output = str(out)
    catalog = catalog or load_catalog()
    if out.is_dir() and any(out.iterdir()) and not overwrite:
        raise UsageError(
            f"output folder {output} exists and is not empty; comparo import writes a new dataset "
            "folder: "
            "give a new folder, or --overwrite to replace the tables it writes there"
        )
    if header_row is not None and (
        isinstance(header_row, bool) or not isinstance(header_row, int) or header_row < 1
    ):
        raise UsageError(
            f"--header-row is the row number of the column headers, 1 or more (got {header_row!r})"
        )
    if plus_minus is not None and plus_minus not in PLUS_MINUS_KINDS:
        raise UsageError(
            f"--plus-minus is one of {', '.join(PLUS_MINUS_KINDS)} (got {plus_minus!r})"
        )
    grid, problems = read_grid(wide, sheet, decimal_comma, header_row)
    if grid is None or any(p.severity == "error" for p in problems):
        raise InputError(problems)
    columns, more = _decide(grid, catalog, mp, wide)
    if more:
        written = _suggest_map(columns, str(output))
        if written:
            more.append(Problem("note", grid.file, None, None, None, "map-file-written", written))
        raise InputError(more)
    long = to_long(grid, columns, decimal_comma, plus_minus, catalog)
    src_table, src_name, src_bytes, stubs, sprobs = _sources(
        src, [r["source_id"] for r in long.records], grid
    )
    problems = long.problems + sprobs
    if not long.records and not problems:
        problems.append(
            Problem(
                "error",
                grid.file,
                None,
                None,
                None,
                "no-values",
                f"no trait cell holds a value ({len(grid.rows)} data row(s))",
                "fill the trait columns, one row per taxon",
            )
        )
    if problems or src_table is None:
        raise InputError(problems)
    extra = [c for c in LONG_COLUMNS[12:] if any(c in r for r in long.records)]
    obs = _frame(long.records, list(LONG_COLUMNS[:12]) + extra)
    taxa = _taxa_frame(long, columns)
    found = _validate(long, obs, src_table, taxa, grid, out)
    found = column_unit_slips(found, long, columns, catalog, grid)  # also when errors stop it
    if any(p.severity == "error" for p in found):
        raise InputError(found)
    warnings = [
        p for p in found if p.severity != "error" and p.rule != "citation-stub"
    ]  # the summary counts the stubs
    for header, cells in long.empty_words.items():
        warnings.append(
            Problem(
                "warning",
                grid.file,
                None,
                header,
                None,
                "missing-word",
                f"{len(cells)} cell(s) say the value is missing "
                f"({', '.join(cells[:5])}{' ...' if len(cells) > 5 else ''}); no row made",
                "nothing to do if they are missing values",
            )
        )
    if long.locator_filled:
        warnings.append(
            Problem(
                "warning",
                grid.file,
                None,
                None,
                None,
                "locator-not-stated",
                f"{long.locator_filled} value(s) without a locator: written as {NOT_STATED!r}",
                "add a Table/Figure/Page column to say where in each source the number is",
            )
        )
    counts = {
        "rows_read": len(grid.rows),
        "observations": len(obs),
        "empty_cells": long.empty,
        "missing_word_cells": sum(len(v) for v in long.empty_words.values()),
        "taxa": int(obs["taxon"].nunique()) if len(obs) else 0,
        "sources": len(src_table),
        "stub_sources": stubs,
        "locator_not_stated": long.locator_filled,
    }
    files = {
        "observations.csv": _csv(obs),
        src_name: src_bytes if src_bytes is not None else _csv(src_table.frame),
    }
    if taxa is not None:
        files["taxa.csv"] = _csv(taxa)
    files["import.toml"] = import_toml(
        grid, wide, sheet, decimal_comma, src, columns, counts, plus_minus, [*files, "import.toml"]
    ).encode("utf-8")
    warnings += _write_folder(out, files, overwrite)
    return ImportResult(
        str(output),
        len(grid.rows),
        len(obs),
        long.empty,
        counts["taxa"],
        len(src_table),
        stubs,
        columns,
        warnings,
        list(files),
    )


def _csv(frame) -> bytes:
    from comparo.base.csvsafe import to_csv

    return to_csv(frame).encode("utf-8")


def _write_folder(out: Path, files: dict[str, bytes], overwrite: bool) -> list[Problem]:
    """A new folder appears whole (written beside it, then renamed). Into an existing one
    (``--overwrite``) each file is replaced atomically, and the tables an earlier import
    wrote there (listed in its import.toml) that this one does not write again are removed;
    nothing else is removed. Every path is checked before the first write: none may be an
    input (:func:`comparo.base.outputs.resolve_output`), and a table of another name that no
    import wrote (``observations.xlsx`` beside the new ``observations.csv``) is refused.
    Returns notes about tables kept."""
    from comparo.base.outputs import _write_error, atomic_write_bytes, resolve_output

    try:
        resolve_output(out)  # the folder itself (and, below, each file) never lands in an input
        if not os.path.lexists(out):
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
            return []
        remove, kept = _earlier_tables(out, files) if overwrite else ([], [])
        for name in [*files, *remove]:
            resolve_output(out / name)
        for name, data in files.items():
            atomic_write_bytes(out / name, data)
        for name in remove:
            (out / name).unlink()
    except OSError as exc:
        raise _write_error(out, exc) from None
    return [
        Problem(
            "warning",
            name,
            None,
            None,
            None,
            "table-kept",
            f"{out / name} was not written by an earlier comparo import (not in its import.toml): "
            "kept "
            "as it is, and it is part of the dataset",
            "remove it if it does not belong to the new import",
        )
        for name in kept
    ]


def _earlier_tables(out: Path, files: dict[str, bytes]) -> tuple[list[str], list[str]]:
    """(tables of an earlier import in *out* to remove, other tables kept); UsageError when a
    table that no import wrote would stand beside a new one of the same kind."""
    from comparo.reading.tables import OBSERVATION_NAMES, SOURCE_NAMES, TAXA_NAMES

    written = _written_by_earlier_import(out)
    remove, kept, clash = [], [], []
    for kind in (OBSERVATION_NAMES, SOURCE_NAMES, TAXA_NAMES):
        new = any(n in files for n in kind)
        for name in kind:
            if name in files or not (out / name).is_file():
                continue
            if name in written:
                remove.append(name)
            elif new:
                clash.append(name)
            else:
                kept.append(name)
    if clash:
        raise UsageError(
            f"output folder {out} holds {', '.join(clash)}, which no comparo import wrote there "
            "(it is not listed in an import.toml); --overwrite replaces only the tables of an "
            "earlier "
            "import: move it away, or import into a new folder"
        )
    return remove, kept


def _written_by_earlier_import(out: Path) -> set[str]:
    """The files an earlier import wrote into *out*, from its import.toml (none without one)."""
    try:
        doc = tomllib.loads((out / "import.toml").read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return set()
    if not isinstance(doc.get("input"), dict):
        return set()
    files = doc.get("output", {}).get("files") if isinstance(doc.get("output"), dict) else None
    if isinstance(files, list):
        return {str(f) for f in files}
    # import.toml of an earlier version: observations.csv, the sources table, taxa.csv if taxa
    # columns
    src = str(doc["input"].get("sources") or "")
    names = {"observations.csv", f"sources{Path(src).suffix.lower()}" if src else "sources.csv"}
    cols = doc.get("columns") if isinstance(doc.get("columns"), list) else []
    if any(isinstance(c, dict) and c.get("role") == "taxa" for c in cols):
        names.add("taxa.csv")
    return names


def _umask() -> int:
    m = os.umask(0)
    os.umask(m)
    return m
