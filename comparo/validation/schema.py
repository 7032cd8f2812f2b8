"""The column rules of ``schema/tables.toml`` (required, type, allowed values, sign,
uniqueness) run on whole columns, so that all failures come back at once; :func:`pandera_schema`
states the same rules as pandera schemas, and the tests check that pandera's lazy validation
finds the same failures."""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

import numpy as np
import pandas as pd

from comparo.base.catalog import read_schema
from comparo.base.errors import Problem
from comparo.reading.tables import RawTable
from comparo.validation.numbers import INT_EXACT, number_message, parse_numbers

# --------------------------------------------------------------------------- column rules


@dataclass(frozen=True)
class ColumnCheck:
    """One declared rule on a column: *fn* maps the present cells (strings) to True where they
    pass."""

    name: str
    fn: Any


@dataclass(frozen=True)
class ColumnRules:
    """The declared rules of one column of a table (from ``schema/tables.toml``)."""

    name: str
    required: bool
    unique: bool
    checks: tuple[ColumnCheck, ...]


def _number_checks(c: dict[str, Any]) -> list[ColumnCheck]:
    kind = c.get("type", "string")
    checks = [ColumnCheck("number", lambda s: (s == "") | parse_numbers(s).notna())]
    if kind == "integer":
        checks.append(
            ColumnCheck(
                "integer", lambda s: (lambda n: n.isna() | (n == np.round(n)))(parse_numbers(s))
            )
        )
    top = c.get("max")
    if top is not None:
        checks.append(
            ColumnCheck(
                "maximum",
                lambda s, top=float(top): (lambda n: n.isna() | (n <= top))(parse_numbers(s)),
            )
        )
    if kind == "integer" and (top is None or float(top) > INT_EXACT):
        checks.append(
            ColumnCheck(
                "integer_range",
                lambda s: (lambda n: n.isna() | (n.abs() <= INT_EXACT))(parse_numbers(s)),
            )
        )
    if c.get("positive"):
        checks.append(
            ColumnCheck("positive", lambda s: (lambda n: n.isna() | (n > 0))(parse_numbers(s)))
        )
    if c.get("nonnegative"):
        checks.append(
            ColumnCheck("nonnegative", lambda s: (lambda n: n.isna() | (n >= 0))(parse_numbers(s)))
        )
    return checks


@lru_cache(maxsize=8)
def column_rules(table: str) -> tuple[ColumnRules, ...]:
    """The column rules of *table* (``observations``, ``sources``, ``taxa``, ...) as declared in
    ``schema/tables.toml``: required cell, number, whole number, maximum, sign, allowed values,
    uniqueness. Built once per table; :func:`pandera_schema` states the same rules as a pandera
    schema."""
    spec = read_schema("tables.toml")[table]["columns"]
    out = []
    for name, c in spec.items():
        checks: list[ColumnCheck] = []
        if c.get("required"):
            checks.append(ColumnCheck("required-cell", lambda s: s != ""))
        if c.get("type", "string") in ("number", "integer"):
            checks += _number_checks(c)
        if c.get("type") == "enum":
            allowed = list(c["values"])
            checks.append(
                ColumnCheck("enum", lambda s, allowed=allowed: (s == "") | s.isin(allowed))
            )
        out.append(ColumnRules(name, bool(c.get("required")), bool(c.get("unique")), tuple(checks)))
    return tuple(out)


@lru_cache(maxsize=8)
def pandera_schema(table: str):
    """The rules of :func:`column_rules` as a pandera ``DataFrameSchema`` (imports pandera).

    For users who validate their own frames with pandera, and for the tests, which check
    that :func:`schema_failures` finds the same failure cases as pandera's lazy validation.
    comparo's commands run the rules with :func:`schema_failures` and do not import
    pandera (its import alone takes about 0.2 s, a command's whole budget).
    """
    import pandera.pandas as pa

    cols = {
        r.name: pa.Column(
            str,
            checks=[pa.Check(k.fn, name=k.name) for k in r.checks],
            required=r.required,
            nullable=False,
            unique=r.unique,
            report_duplicates="exclude_first",
            coerce=False,
        )
        for r in column_rules(table)
    }
    return pa.DataFrameSchema(cols, strict=False, ordered=False)


_MESSAGES = {
    "required-cell": ("required cell is empty", "fill it in"),
    "number": ("not a number", None),
    "integer": ("not a whole number", "sample sizes are counts"),
    "positive": ("must be greater than 0", ""),
    "nonnegative": ("must not be negative", "give the spread as a positive number"),
    "enum": ("not an allowed value", None),
    "field_uniqueness": (
        "duplicate value; this column must be unique",
        "give every row its own id",
    ),
    "integer_range": (
        f"whole number too large (limit {INT_EXACT:,})",
        "check for a pasted or mistyped number",
    ),
}


def schema_failures(rules: tuple[ColumnRules, ...], frame: pd.DataFrame) -> list[dict[str, Any]]:
    """The failures of *frame* against the column *rules* (:func:`column_rules`), run on
    whole columns.

    The records have the form and order of pandera's lazy validation
    (``SchemaErrors.failure_cases``: ``column``, ``check``, ``index``, ``failure_case``):
    missing required columns, then per column in declared order the null cells, the
    repeated values (all but the first) and each check's failing cells. Missing cells are
    skipped by the checks, as pandera's ``ignore_na`` does. A test checks that the records
    equal pandera's own validation with :func:`pandera_schema` on random hostile tables.
    """
    out = [
        {"column": None, "check": "column_in_dataframe", "index": None, "failure_case": r.name}
        for r in rules
        if r.required and r.name not in frame.columns
    ]
    for r in rules:
        name = r.name
        if name not in frame.columns:
            continue
        s = frame[name]
        null = s.isna().to_numpy()

        def add(mask: np.ndarray, check: str, s=s, name=name) -> None:
            for i in np.flatnonzero(mask):
                out.append(
                    {"column": name, "check": check, "index": s.index[i], "failure_case": s.iat[i]}
                )

        add(null, "not_nullable")  # no column declares missing cells allowed
        if r.unique:
            add(s.duplicated(keep="first").to_numpy() & ~null, "field_uniqueness")
        present = s[~null] if null.any() else s
        for check in r.checks:
            ok = np.asarray(check.fn(present), dtype=bool)
            bad = np.zeros(len(s), dtype=bool)
            bad[np.flatnonzero(~null)[~ok]] = True
            add(bad, check.name)
    return out


def column_problems(table: RawTable, name: str) -> list[Problem]:
    """Check a raw table against the column rules of *name*; one Problem per failure."""
    spec = read_schema("tables.toml")[name]["columns"]
    frame = table.frame
    fc = schema_failures(column_rules(name), frame)
    if not fc:
        return []
    probs: list[Problem] = []
    first_row: dict[tuple[str, str], int] = {}
    for rec in fc:
        col, check, case, idx = (
            rec.get("column"),
            str(rec.get("check")),
            rec.get("failure_case"),
            rec.get("index"),
        )
        if check == "column_in_dataframe":
            probs.append(
                Problem(
                    "error",
                    table.file,
                    None,
                    str(case),
                    None,
                    "missing-column",
                    f"required column {case!r} is missing",
                    f"add a column named {case!r} "
                    f"({spec.get(str(case), {}).get('description', '')})",
                )
            )
            continue
        if idx is None or (isinstance(idx, float) and np.isnan(idx)):
            continue
        rule = check.split("(")[0]
        row = table.rows[int(idx)]
        value = None if case is None else str(case)
        message, hint = _MESSAGES.get(rule, (f"breaks rule {rule}", ""))
        if rule == "number":
            message, hint = number_message(value or "")
        elif rule == "maximum":
            top = float(spec[col]["max"])
            message, hint = (
                f"larger than the largest plausible value ({top:g})",
                f"{spec[col].get('description', col)} Check for a pasted or mistyped number.",
            )
        elif rule == "enum":
            allowed = spec[col]["values"]
            close = difflib.get_close_matches((value or "").lower(), allowed, n=1)
            hint = f"use one of: {', '.join(allowed)}" + (
                f" (did you mean {close[0]!r}?)" if close else ""
            )
        elif rule == "field_uniqueness":
            rule = "unique"
            key = (col, value)
            if key not in first_row:
                where = frame.index[frame[col] == value]
                first_row[key] = table.rows[int(where[0])]
            hint = f"the same value is on row {first_row[key]}"
        probs.append(
            Problem(
                "error",
                table.file,
                row,
                col,
                value,
                f"{col}-{rule.replace('_', '-')}"
                if rule in ("number", "integer", "enum", "maximum", "integer_range")
                else rule,
                message,
                hint,
            )
        )
    return probs
