"""A wide table's filled cells turned into long-format observations (one row per value),
each problem named at the wide table's own cell (``C7``)."""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass, field
from typing import Any

from comparo.base.catalog import Catalog, load_catalog
from comparo.base.errors import Problem
from comparo.curation.cells import SPREAD_EXAMPLE, parse_cell, percent_scale, split_plus_minus
from comparo.reading.headers import (
    UNCERTAINTY_ROLES,
    Column,
    split_unit,
)
from comparo.reading.sheets import Grid
from comparo.reading.workbook import Percent
from comparo.validation.numbers import MISSING_WORDS

NOT_STATED = "not stated"  # locator written when the wide table gives none
# the citation of a source comparo import had to invent; check warns (citation-stub)
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

# --------------------------------------------------------------------------- cells to rows


@dataclass
class LongTable:
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
    if hint.endswith(SPREAD_EXAMPLE):  # the example spread column named after this column
        name, unit = split_unit(c.header)
        hint = hint[: -len(SPREAD_EXAMPLE)] + f"'{name} SD" + (f" ({unit})'" if unit else "'")
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
) -> LongTable:
    """One long-format record per filled trait cell (see the module docstring). With
    *plus_minus* (one of :data:`PLUS_MINUS_KINDS`), a trait cell ``12.5 ± 0.3`` is the value
    12.5 with the uncertainty 0.3 of that kind."""
    cat = catalog if catalog is not None else load_catalog()
    wide = _Wide(
        grid, columns, decimal_comma, plus_minus, {k for k in cat if cat[k].temperature_sensitive}
    )
    for i, rownum in enumerate(grid.row_numbers):
        wide.row(i, rownum)
    return wide.out


class _Wide:
    """The state of :func:`to_long` over the rows of one wide table."""

    def __init__(
        self,
        grid: Grid,
        columns: list[Column],
        decimal_comma: bool,
        plus_minus: str | None,
        rates: set[str],
    ) -> None:
        self.grid, self.decimal_comma, self.plus_minus, self.rates = (
            grid,
            decimal_comma,
            plus_minus,
            rates,
        )
        self.out = LongTable()
        self.by_role: dict[str, list[Column]] = {}
        for c in columns:
            self.by_role.setdefault(c.role, []).append(c)
        self.single = {
            r: next((c for c in self.by_role.get(r, []) if not c.key), None)
            for r in ("taxon", "source", "locator", "temperature", "n")
        }
        self.per_key = {
            (c.role, c.key): c
            for c in columns
            if c.role in (*UNCERTAINTY_ROLES, "n", "source", "locator") and c.key
        }
        self.seen: dict[str, int] = {}

    def text(self, i: int, c: Column | None) -> str:
        if c is None:
            return ""
        v = self.grid.rows[i][c.index]
        return (
            (str(int(v)) if isinstance(v, float) and v.is_integer() else repr(v))
            if isinstance(v, float)
            else v
        )

    def number(self, i: int, c: Column, unit: str | None = None) -> str | None:
        """The cell as number text, or None (empty, a missing-word, or a problem); *unit* is
        the trait's, for a percentage cell."""
        grid, out = self.grid, self.out
        v = grid.rows[i][c.index]
        if isinstance(v, str) and not v:
            return None
        if isinstance(v, str) and v.casefold() in MISSING_WORDS:
            out.empty_words.setdefault(c.header, []).append(grid.coordinate(i, c.index))
            return None
        if isinstance(v, Percent) and math.isfinite(v):
            unit = c.unit if unit is None else unit
            scale = percent_scale(unit)
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
            return v.shown() if scale == 100 else parse_cell(float(v), self.decimal_comma)[0]
        t, msg, hint = parse_cell(v, self.decimal_comma)
        if t is None:
            out.problems.append(_number_problem(grid, c, i, v, msg, hint))
        return t

    def row(self, i: int, rownum: int) -> None:
        """The records of one wide row (one per filled trait cell) and its per-taxon cells."""
        from comparo.base import units

        grid, out, single = self.grid, self.out, self.single
        taxon = self.text(i, single["taxon"])
        temp = self.number(i, single["temperature"]) if single["temperature"] else None
        if temp is not None:
            t_unit = units.parse_unit(single["temperature"].unit).units
            kelvin_safe = units.registry().Quantity(float(temp), t_unit)  # pint converts offsets
            temp = f"{kelvin_safe.to('degC').magnitude:.12g}"
        n_all = self.number(i, single["n"]) if single["n"] else None
        copies = {c.key: self.text(i, c) for c in self.by_role.get("column", [])}
        for c in self.by_role.get("taxa", []):
            val = self.text(i, c)
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
        for c in self.by_role.get("value", []):
            self.value(i, rownum, c, taxon, (temp, n_all), copies)

    def value(
        self, i: int, rownum: int, c: Column, taxon: str, row_cells: tuple, copies: dict
    ) -> None:
        """The record of the trait cell of column *c* on row *i*, if it holds a value;
        *row_cells* are the row's temperature (°C) and sample size, as number text."""
        grid, out, single = self.grid, self.out, self.single
        pm = split_plus_minus(grid.rows[i][c.index]) if self.plus_minus else None
        if pm is not None:
            value, pm_spread = _split_cell(grid, c, i, pm, self.decimal_comma, out.problems)
            if value is None:
                return
        else:
            value, pm_spread = self.number(i, c), None
        if value is None:
            cell = grid.rows[i][c.index]
            out.empty += 1 if isinstance(cell, str) and not cell else 0
            return
        coord = grid.coordinate(i, c.index)
        here = (c.header, coord, rownum)
        origin = {"value": here, "quantity": here, "unit": here}
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
                        f"cell {grid.coordinate(i, tc.index)} is empty, but {coord} holds a value",
                        "give the taxon name",
                    )
                )
            return
        rec = {
            "taxon": taxon,
            "quantity": c.key,
            "value": value,
            "unit": c.unit,
            "basis": copies.get("basis") or c.basis or "reported",
        }
        self.source_and_locator(i, rownum, c, rec, origin, coord)
        self.spread(i, rownum, c, rec, origin, pm_spread, coord)
        self.n_and_temperature(i, rownum, c, rec, origin, row_cells)
        for k, v in copies.items():
            if k != "basis" and v and (k != "q10" or c.key in self.rates):  # Q10: rates only
                rec[k] = v
        note = f"imported from {grid.file} cell {coord}"
        rec["notes"] = f"{note}; {copies['notes']}" if copies.get("notes") else note
        base = "|".join(
            (taxon, rec["source_id"], rec["locator"], c.header, copies.get("muscle", ""))
        )
        self.seen[base] = self.seen.get(base, 0) + 1
        digest = hashlib.sha256(f"{base}|{self.seen[base]}".encode()).hexdigest()[:10]
        rec["obs_id"] = f"imp_{digest}"
        out.records.append(rec)
        out.origin.append(origin)

    def source_and_locator(
        self, i: int, rownum: int, c: Column, rec: dict, origin: dict, coord: str
    ) -> None:
        """A trait's own source or locator column; where its cell is empty, the row's."""
        grid, single = self.grid, self.single
        src_col = _filled(
            self.per_key.get(("source", c.key)), single["source"], lambda col: self.text(i, col)
        )
        loc_col = _filled(
            self.per_key.get(("locator", c.key)), single["locator"], lambda col: self.text(i, col)
        )
        rec["source_id"] = self.text(i, src_col)
        if not rec["source_id"] and src_col is not None:
            self.out.problems.append(
                Problem(
                    "error",
                    grid.file,
                    rownum,
                    src_col.header,
                    "",
                    "source-missing",
                    f"cell {grid.coordinate(i, src_col.index)} is empty, but {coord} holds a value",
                    "give the source id of the value",
                )
            )
        rec["locator"] = self.text(i, loc_col) or NOT_STATED
        self.out.locator_filled += rec["locator"] == NOT_STATED
        for col, src in (("source_id", src_col), ("locator", loc_col), ("taxon", single["taxon"])):
            if src is not None:
                origin[col] = (src.header, grid.coordinate(i, src.index), rownum)

    def spread(
        self,
        i: int,
        rownum: int,
        c: Column,
        rec: dict,
        origin: dict,
        pm_spread: str | None,
        coord: str,
    ) -> None:
        """The uncertainty of the record: after ± in the cell, or from the trait's spread column."""
        from comparo.base import units

        grid = self.grid
        spread = next(
            (self.per_key[(r, c.key)] for r in UNCERTAINTY_ROLES if (r, c.key) in self.per_key),
            None,
        )
        if pm_spread is not None:
            rec["uncertainty"], rec["uncertainty_kind"] = pm_spread, self.plus_minus
            origin["uncertainty"] = origin["value"]
            if spread is not None and self.text(i, spread):
                self.out.problems.append(
                    Problem(
                        "error",
                        grid.file,
                        rownum,
                        spread.header,
                        self.text(i, spread),
                        "spread-twice",
                        f"cell {coord} gives a spread after ± and cell "
                        f"{grid.coordinate(i, spread.index)} gives one too",
                        "keep one of them",
                    )
                )
        elif spread is not None:
            u = self.number(i, spread, spread.unit or c.unit)
            if u is not None:
                if spread.unit and spread.unit != c.unit:
                    u = f"{float(u) * units.conversion_factor(spread.unit, c.unit):.15g}"
                rec["uncertainty"], rec["uncertainty_kind"] = u, spread.role
                origin["uncertainty"] = (spread.header, grid.coordinate(i, spread.index), rownum)

    def n_and_temperature(
        self, i: int, rownum: int, c: Column, rec: dict, origin: dict, row_cells: tuple
    ) -> None:
        """The sample size (the trait's own n column, else the row's) and the temperature."""
        grid, single = self.grid, self.single
        temp, n_all = row_cells
        own_n = self.per_key.get(("n", c.key))
        n, n_col = (self.number(i, own_n), own_n) if own_n is not None else (n_all, single["n"])
        if n is not None:
            rec["n"] = n
            origin["n"] = (n_col.header, grid.coordinate(i, n_col.index), rownum)
        typed: dict[str, tuple[str, str]] = {}
        if temp is not None:
            t_col = single["temperature"]
            rec["temperature_c"] = temp
            origin["temperature_c"] = (t_col.header, grid.coordinate(i, t_col.index), rownum)
            typed["temperature_c"] = (self.text(i, t_col), t_col.unit)
        self.out.typed.append(typed)


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
