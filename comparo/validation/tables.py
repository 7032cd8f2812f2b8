"""Validation: every problem of a dataset found in one pass.

Column rules (required, type, allowed values, sign, uniqueness) are read from
``schema/tables.toml`` and run on whole columns, so that all failures come back
at once; :func:`pandera_schema` states the same rules as pandera schemas, and
the tests check that pandera's lazy validation finds the same failures. Rules that span columns or
tables (units against the quantity catalogue, sources, computed and proxy
rows, temperature, plausible ranges, DOIs, binomial names) are vectorised
checks below. Each failure becomes a :class:`~comparo.base.errors.Problem` at the
row a spreadsheet shows.
"""

from __future__ import annotations

import difflib
import math
import re
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from comparo.base.catalog import Catalog, load_catalog, read_schema
from comparo.base.errors import InputError, Problem, problems_frame, problems_from_frame
from comparo.reading.tables import RawDataset, RawTable, cell_coordinates, read_folder
from comparo.validation.synonyms import resolve_synonyms
from comparo.validation.temperature import temperature_policy, temperature_settings_problems

BASIS_ORDER = ["reported", "computed", "digitized", "proxy", "assumed"]
#: The basis of a per-taxon value predicted from relatives on the tree (``--impute``,
#: ``[impute]``), weaker than every basis above; never a basis of observations.csv.
IMPUTED_BASIS = "imputed"
_MISSING_WORDS = {"na", "n/a", "nan", "n.d.", "nd", "none", "null", "-", "?", "—", "–"}
_DOI = re.compile(r"^10\.\d{4,9}/\S+$")
_BINOMIAL = re.compile(r"^[A-Z][a-z]+(?:\s[a-z][a-z-]+){1,2}$")
INT_EXACT = (
    2**53 - 1
)  # largest whole number a float64 holds exactly (IEEE 754); fits a 64-bit integer
DOUBLE_MAX = float(np.finfo(float).max)  # about 1.8e308 (IEEE 754 binary64)
# Magnitudes comparo computes with, in canonical units: their squares and products of two stay
# inside a double (1e-300 to 1e300), so no weight, variance or derived time over- or underflows.
WORKING_RANGE = (1e-150, 1e150)
_MANTISSA = re.compile(r"^\s*[-+]?(\d*\.?\d*)(?:[eE][-+]?\d+)?\s*$")


# --------------------------------------------------------------------------- helpers


def map_distinct(s: pd.Series, fn) -> pd.Series:
    """``s.map(fn)`` with *fn* called once per distinct value (a 100,000-row column
    holds a few dozen quantity keys)."""
    return s.map({k: fn(k) for k in pd.unique(s)}) if len(s) else s.map(fn)


def parse_numbers(s: pd.Series) -> pd.Series:
    """Cells as float (NaN where empty or not a finite number, and where a non-zero
    number such as ``1e-400`` is too small for a double and would read as 0)."""
    num = pd.to_numeric(s.where(s != ""), errors="coerce").astype(float)
    num = num.where(np.isfinite(num))
    zero = (num == 0).to_numpy()
    if zero.any():
        under = s[zero].str.match(r"^[^eE]*[1-9]").to_numpy(dtype=bool)
        num.iloc[np.flatnonzero(zero)[under]] = np.nan
    return num


def beyond_double(text: str) -> str:
    """``'over'`` when *text* is a finite-looking number too large for a double
    (``1e400``), ``'under'`` when it is non-zero but too small (``1e-400`` reads as 0),
    else ``''``."""
    m = _MANTISSA.match(text or "")
    if not m or not re.search(r"\d", m.group(1)):
        return ""
    try:
        v = float(text)
    except ValueError:
        return ""
    if math.isinf(v):
        return "over"
    if v == 0 and re.search(r"[1-9]", m.group(1)):
        return "under"
    return ""


def _number_message(value: str) -> tuple[str, str]:
    """Message and hint for a cell that is not a usable number."""
    side = beyond_double(value)
    if side == "over":
        return (
            f"beyond the range of a double (largest about {DOUBLE_MAX:.3g})",
            "a pasted or mistyped exponent? give the number in a unit that keeps it below 1e150",
        )
    if side == "under":
        return (
            "below the smallest number a double holds (about 5e-324): it would read as 0",
            "a mistyped exponent? give the number in a unit that keeps it above 1e-150",
        )
    return "not a number", _number_hint(value)


def _number_hint(value: str) -> str:
    v = value.strip()
    if re.fullmatch(r"[-+]?\d+,\d+", v):
        return f"a decimal comma? write {v.replace(',', '.')}"
    if re.fullmatch(r"[-+]?\d{1,3}(\.\d{3})+,\d+", v):
        return f"a decimal comma with '.' between thousands? write {v.replace('.', '').replace(',', '.')}"
    if re.fullmatch(r"[-+]?\d{1,3}(,\d{3})+(\.\d+)?", v):
        return f"a ',' between thousands? write {v.replace(',', '')}"
    if re.fullmatch(r"[-+]?0[xX][0-9a-fA-F]+", v):
        return f"a hexadecimal number is not read: write it in decimal ({int(v, 16)})"
    if v[:1] in "<>≤≥~":
        return "a censored or approximate value cannot be used as a number: give the number and put the qualifier in notes"
    if v.lower() in _MISSING_WORDS:
        return "no value: delete the row (an empty measurement is not an observation) or give the number"
    if v.lower().lstrip("+-") in {"inf", "infinity"}:
        return "give a finite number"
    if re.search(r"\d\s*[a-zA-Zµ%]+$", v):
        return "put the unit in the unit column, the number alone in this one"
    if "±" in v or "+/-" in v:
        return "put the spread in the uncertainty column"
    return "enter a plain number such as 12.5 or 1.2e-3"


@dataclass(frozen=True)
class _Rule:
    rule: str
    message: str


# --------------------------------------------------------------------------- column rules


@dataclass(frozen=True)
class ColumnCheck:
    """One declared rule on a column: *fn* maps the present cells (strings) to True where they pass."""

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


def _column_problems(table: RawTable, name: str) -> list[Problem]:
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
                    f"add a column named {case!r} ({spec.get(str(case), {}).get('description', '')})",
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
            message, hint = _number_message(value or "")
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


# --------------------------------------------------------------------------- observations


def _beyond_working_range(
    value: np.ndarray, converted: np.ndarray, factor: np.ndarray
) -> np.ndarray:
    """Non-zero finite values whose conversion over- or underflows a double or leaves
    :data:`WORKING_RANGE`."""
    mag = np.abs(converted)
    with np.errstate(invalid="ignore"):
        return (
            np.isfinite(value)
            & (value != 0)
            & np.isfinite(factor)
            & (~np.isfinite(converted) | (mag < WORKING_RANGE[0]) | (mag > WORKING_RANGE[1]))
        )


def _typed_observations(raw: RawTable) -> pd.DataFrame:
    spec = read_schema("tables.toml")["observations"]["columns"]
    obs = raw.frame.copy()
    for name, c in spec.items():
        if name not in obs.columns:
            obs[name] = ""
        if c.get("type") in ("number", "integer"):
            obs[name] = parse_numbers(obs[name])
    obs.insert(0, "row", np.asarray(raw.rows, dtype=int))
    return obs


class _Problems:
    """The problems of one observations table, collected in one pass."""

    def __init__(self, file: str, obs: pd.DataFrame) -> None:
        self.file = file
        self.obs = obs
        self.rows = obs["row"].to_numpy()
        self.problems: list[Problem] = []

    def add(self, mask, severity, column, rule, message, hint="", values=None) -> None:
        """One problem per row where *mask* holds; *message* and *hint* may be functions of the row index."""
        obs, rows = self.obs, self.rows
        idx = np.flatnonzero(np.asarray(mask, dtype=bool))
        vals = obs[column].astype(str).to_numpy() if values is None and column in obs else values
        for i in idx:
            m = message(i) if callable(message) else message
            h = hint(i) if callable(hint) else hint
            self.problems.append(
                Problem(
                    severity,
                    self.file,
                    int(rows[i]),
                    column,
                    None if vals is None else str(vals[i]),
                    rule,
                    m,
                    h,
                )
            )


def _observation_problems(
    raw: RawTable,
    obs: pd.DataFrame,
    catalog: Catalog,
    source_ids: set[str] | None,
    settings: dict[str, Any],
) -> tuple[pd.DataFrame, list[Problem]]:
    """Cross-column rules; returns the observations with canonical columns added."""
    c = _Problems(raw.file, obs)
    qty = obs["quantity"]
    known = qty.isin(list(catalog))
    target_key = map_distinct(qty, lambda k: catalog.target(k).key if k in catalog else "")
    _check_quantity_names(c, qty, known, catalog)
    _to_canonical_units(c, raw, obs, catalog, qty, known, target_key)
    _check_sign(c, obs, catalog, qty, target_key)
    if source_ids is not None:
        _check_sources(c, obs, source_ids)
    _check_lineage_columns(c, obs)
    _check_temperature(c, raw, obs, catalog, qty, target_key)
    _check_uncertainty(c, raw, obs)
    _check_plausible_range(c, obs, catalog, target_key)
    _check_names(c, obs)
    return obs, c.problems


def _name(text: str) -> str:
    """A quantity name for comparison: case-folded, British 'fibre' as 'fiber', '_', '-' and spaces one space."""
    return " ".join(
        re.sub(r"[_\-\s]+", " ", str(text).casefold().replace("fibre", "fiber")).split()
    )


def _check_quantity_names(c: _Problems, qty: pd.Series, known: pd.Series, catalog: Catalog) -> None:
    """Every quantity is a key of the catalogue (with the closest key as a hint)."""
    # quantity known?
    unknown = ~known & (qty != "")
    if unknown.any():
        keys = list(catalog)
        names = {_name(t): k for k, q in catalog.items() for t in (k, q.label, *q.synonyms)}

        def qhint(i):
            named = names.get(
                _name(qty.iat[i])
            )  # a label or synonym of a key ('wingbeat frequency')
            if named:
                return f"{qty.iat[i]!r} is a name of the quantity {named!r}: write its key {named!r} (see 'comparo units')"
            close = difflib.get_close_matches(qty.iat[i], keys, n=1)
            return (
                (f"did you mean {close[0]!r}? " if close else "")
                + "see 'comparo units' for the catalogue, or declare it in comparo.toml [quantities.KEY]"
            )

        c.add(
            unknown,
            "error",
            "quantity",
            "quantity-unknown",
            lambda i: f"unknown quantity {qty.iat[i]!r}",
            qhint,
        )


def _to_canonical_units(
    c: _Problems,
    raw: RawTable,
    obs: pd.DataFrame,
    catalog: Catalog,
    qty: pd.Series,
    known: pd.Series,
    target_key: pd.Series,
) -> None:
    """Units parsed and dimension-checked; value_canonical, uncertainty_canonical, unit_canonical,
    quantity_key and basis_effective added to *obs* (values beyond the working range set to NaN)."""
    from comparo.base import units

    # units: parse each distinct string once, dimension-check each distinct (quantity, unit)
    factor = np.full(len(obs), np.nan)
    unit_col = obs["unit"]
    canon = map_distinct(target_key, lambda k: catalog[k].unit if k else "")
    alias = map_distinct(qty, lambda k: catalog[k].factor if k in catalog else np.nan).astype(float)
    pairs = pd.DataFrame({"q": qty, "u": unit_col})[known & (unit_col != "")].drop_duplicates()
    bad_unit: dict[str, str] = {}
    fac: dict[tuple[str, str], float] = {}
    for q, u in pairs.itertuples(index=False):
        if u in bad_unit:
            continue
        try:
            units.check_unit(u)
        except units.UnitParseError as exc:
            bad_unit[u] = str(exc)
            continue
        own = catalog[q].unit
        try:
            fac[(q, u)] = units.conversion_factor(u, own)
        except Exception:
            fac[(q, u)] = np.nan
    if bad_unit:
        mask = unit_col.isin(list(bad_unit))
        c.add(
            mask,
            "error",
            "unit",
            "unit-unknown",
            lambda i: bad_unit[unit_col.iat[i]],
            "write units as pint reads them: um, µm, nm, mm, kPa, Pa, 1/s, Hz, mPa*s, nm**2, kg, mg",
        )
    if fac:
        keys = pd.MultiIndex.from_arrays([qty, unit_col])
        factor = pd.Series(fac).reindex(keys).to_numpy(dtype=float)
        mism = (
            known.to_numpy()
            & ~unit_col.isin(list(bad_unit)).to_numpy()
            & (unit_col != "").to_numpy()
            & np.isnan(factor)
        )

        def dim_msg(i):
            q = catalog[qty.iat[i]]
            return f"unit {unit_col.iat[i]!r} does not measure a {q.kind} (the quantity {q.key!r} is in {q.unit})"

        c.add(
            mism,
            "error",
            "unit",
            "unit-dimension",
            dim_msg,
            lambda i: (
                f"give {qty.iat[i]} in a {catalog[qty.iat[i]].kind} unit such as {units.pretty(catalog[qty.iat[i]].unit)}"
            ),
        )
    # own unit -> target canonical unit (aliases such as diameter -> radius keep the unit kind)
    to_target = np.array(
        [
            units.conversion_factor(catalog[q].unit, catalog.target(q).unit)
            if q in catalog
            else np.nan
            for q in qty.drop_duplicates()
        ]
    )
    tmap = dict(zip(qty.drop_duplicates(), to_target, strict=True))
    total = factor * alias.to_numpy() * qty.map(tmap).to_numpy(dtype=float)
    value = obs["value"].to_numpy(dtype=float)
    obs["quantity_key"] = target_key.to_numpy()
    with np.errstate(over="ignore", under="ignore", invalid="ignore"):
        obs["value_canonical"] = value * total
        obs["uncertainty_canonical"] = obs["uncertainty"].to_numpy(dtype=float) * total
    not_temperature = map_distinct(
        target_key, lambda k: bool(k) and catalog[k].kind != "temperature"
    ).to_numpy(dtype=bool)
    for col, canon_col in (("value", "value_canonical"), ("uncertainty", "uncertainty_canonical")):
        bad = (
            _beyond_working_range(
                obs[col].to_numpy(dtype=float), obs[canon_col].to_numpy(dtype=float), total
            )
            & not_temperature
        )
        if bad.any():
            vc_all = obs[canon_col].to_numpy(dtype=float)

            def conv_msg(i, col=col, vc_all=vc_all):
                unit = units.pretty(canon.iat[i]) if canon.iat[i] else canon.iat[i]
                vc = vc_all[i]
                if not np.isfinite(vc):
                    what = f"overflows a double (becomes inf {unit})"
                elif vc == 0:
                    what = f"underflows a double (becomes 0 {unit})"
                else:
                    what = f"gives {vc:.3g} {unit}, outside the range comparo computes with ({WORKING_RANGE[0]:g} to {WORKING_RANGE[1]:g} {unit})"
                return f"{col} {raw.frame[col].iat[i]} {unit_col.iat[i]} converted to {unit} {what}"

            c.add(
                bad,
                "error",
                col,
                f"{col}-conversion-range",
                conv_msg,
                "check the number and its unit (a mistyped exponent or unit prefix?)",
                raw.frame[col].to_numpy() if col in raw.frame else None,
            )
            obs.loc[bad, canon_col] = np.nan  # never carried into a table, an export or a fit
    obs["unit_canonical"] = canon.to_numpy()
    is_alias = map_distinct(qty, lambda k: bool(k in catalog and catalog[k].converts_to)).to_numpy(
        dtype=bool
    )
    basis = obs["basis"].where(obs["basis"].isin(BASIS_ORDER), "assumed")
    rank = basis.map({b: i for i, b in enumerate(BASIS_ORDER)}).to_numpy(
        dtype=int
    )  # int even when there are no rows
    eff_rank = np.where(is_alias, np.maximum(rank, BASIS_ORDER.index("computed")), rank)
    obs["basis_effective"] = np.array(BASIS_ORDER, dtype=object)[eff_rank]


def _check_sign(
    c: _Problems, obs: pd.DataFrame, catalog: Catalog, qty: pd.Series, target_key: pd.Series
) -> None:
    """Physical magnitudes of the catalogue are positive (temperatures excepted)."""
    value = obs["value"].to_numpy(dtype=float)
    # sign: physical magnitudes in the catalogue are positive (temperatures excepted)
    positive_kind = map_distinct(
        target_key, lambda k: bool(k) and catalog[k].kind != "temperature"
    ).to_numpy(dtype=bool)
    nonpos = positive_kind & (value <= 0)
    c.add(
        nonpos,
        "error",
        "value",
        "value-positive",
        lambda i: f"{qty.iat[i]} must be greater than 0",
        "a zero or negative value is impossible for this quantity: check the sign and the unit",
        obs["value"].to_numpy(),
    )


def _check_sources(c: _Problems, obs: pd.DataFrame, source_ids: set[str]) -> None:
    """Every source_id is in the sources table."""
    # sources
    sid = obs["source_id"]
    missing_src = (sid != "") & ~sid.isin(list(source_ids))
    c.add(
        missing_src,
        "error",
        "source_id",
        "source-unknown",
        lambda i: f"source {sid.iat[i]!r} is not in the sources table",
        "add it to sources.csv / sources.bib or correct the id",
    )


def _check_lineage_columns(c: _Problems, obs: pd.DataFrame) -> None:
    """Computed rows name their inputs (existing obs_ids, not themselves); proxies name the proxy taxon."""
    # computed rows need their inputs; proxies need the proxy taxon
    b = obs["basis"]
    comp = (b == "computed").to_numpy()
    no_inputs = comp & (obs["inputs"] == "").to_numpy()
    c.add(
        no_inputs,
        "error",
        "inputs",
        "computed-inputs",
        "basis is 'computed' but inputs is empty",
        "list the obs_ids the value was computed from, ';'-separated",
    )
    ids = set(obs["obs_id"])
    has_inputs = (obs["inputs"] != "").to_numpy()
    for i in np.flatnonzero(has_inputs):
        refs = [r.strip() for r in obs["inputs"].iat[i].split(";") if r.strip()]
        missing = [r for r in refs if r not in ids]
        if missing:
            c.problems.append(
                Problem(
                    "error",
                    c.file,
                    int(c.rows[i]),
                    "inputs",
                    obs["inputs"].iat[i],
                    "inputs-unknown",
                    f"inputs name obs_id(s) not in the table: {', '.join(missing)}",
                    "each input must be an obs_id of another row",
                )
            )
        if obs["obs_id"].iat[i] in refs:
            c.problems.append(
                Problem(
                    "error",
                    c.file,
                    int(c.rows[i]),
                    "inputs",
                    obs["inputs"].iat[i],
                    "inputs-self",
                    "a row cannot be computed from itself",
                    "",
                )
            )
    no_proxy = (b == "proxy").to_numpy() & (obs["proxy_taxon"] == "").to_numpy()
    c.add(
        no_proxy,
        "error",
        "proxy_taxon",
        "proxy-taxon",
        "basis is 'proxy' but proxy_taxon is empty",
        "name the taxon whose value stands in",
    )


def _check_temperature(
    c: _Problems,
    raw: RawTable,
    obs: pd.DataFrame,
    catalog: Catalog,
    qty: pd.Series,
    target_key: pd.Series,
) -> None:
    """Temperature-sensitive values need a temperature; impossible and unusual temperatures; unused Q10."""
    # temperature-sensitive values need a temperature
    ts = map_distinct(target_key, lambda k: bool(k) and catalog[k].temperature_sensitive).to_numpy(
        dtype=bool
    )
    temp = obs["temperature_c"].to_numpy(dtype=float)
    raw_temp = (
        raw.frame["temperature_c"] if "temperature_c" in raw.frame else pd.Series([""] * len(obs))
    )
    no_temp = ts & (raw_temp.to_numpy() == "")
    c.add(
        no_temp,
        "warning",
        "temperature_c",
        "temperature-missing",
        lambda i: f"{qty.iat[i]} is temperature-sensitive but has no temperature_c",
        "give the measurement temperature; otherwise the value is used un-normalised",
        raw_temp.to_numpy(),
    )
    impossible = ~np.isnan(temp) & ((temp < -273.15) | (temp > 1000))
    c.add(
        impossible,
        "error",
        "temperature_c",
        "temperature-impossible",
        "temperature below absolute zero (-273.15 °C) or above 1000 °C",
        "temperature_c is in degrees Celsius",
        obs["temperature_c"].to_numpy(),
    )
    odd_temp = ~np.isnan(temp) & ~impossible & ((temp < -5) | (temp > 60))
    c.add(
        odd_temp,
        "warning",
        "temperature_c",
        "temperature-range",
        "temperature outside -5 to 60 °C for muscle",
        "temperature_c is in degrees Celsius (a Fahrenheit or kelvin value?)",
        obs["temperature_c"].to_numpy(),
    )
    q10_set = ~np.isnan(obs["q10"].to_numpy(dtype=float)) & ~ts & (target_key != "").to_numpy()
    c.add(
        q10_set,
        "warning",
        "q10",
        "q10-unused",
        lambda i: f"a Q10 is given but {qty.iat[i]} is not temperature-sensitive (ignored)",
    )


def _check_uncertainty(c: _Problems, raw: RawTable, obs: pd.DataFrame) -> None:
    """An uncertainty and its kind go together."""
    # uncertainty and its kind go together
    unc = obs["uncertainty"].to_numpy(dtype=float)
    kind = obs["uncertainty_kind"]
    c.add(
        ~np.isnan(unc) & (kind == "").to_numpy(),
        "warning",
        "uncertainty_kind",
        "uncertainty-kind",
        "uncertainty given without uncertainty_kind: treated as a standard deviation",
        "give sd, se, ci95 or range_half",
        obs["uncertainty"].to_numpy(),
    )
    c.add(
        np.isnan(unc)
        & (kind != "").to_numpy()
        & (raw.frame.get("uncertainty", pd.Series([""] * len(obs))) == "").to_numpy(),
        "warning",
        "uncertainty",
        "uncertainty-missing",
        "uncertainty_kind given without an uncertainty value",
    )


def _check_plausible_range(
    c: _Problems, obs: pd.DataFrame, catalog: Catalog, target_key: pd.Series
) -> None:
    """Values outside the catalogue's plausible range (canonical units) are warned of."""
    from comparo.base import units

    # plausible range (in canonical units)
    lo = map_distinct(
        target_key, lambda k: catalog[k].range[0] if k and catalog[k].range else np.nan
    ).to_numpy(dtype=float)
    hi = map_distinct(
        target_key, lambda k: catalog[k].range[1] if k and catalog[k].range else np.nan
    ).to_numpy(dtype=float)
    vc = obs["value_canonical"].to_numpy(dtype=float)
    out = ~np.isnan(vc) & ((vc < lo) | (vc > hi))

    def range_msg(i):
        q = catalog[target_key.iat[i]]
        return f"{vc[i]:.4g} {units.pretty(q.unit)} is outside the plausible range {q.range[0]:g}-{q.range[1]:g} {units.pretty(q.unit)} for {q.key} ({q.range_source})"

    c.add(
        out,
        "warning",
        "value",
        "out-of-range",
        range_msg,
        "check the value and its unit (a slip by a factor of 1000?)",
        obs["value"].to_numpy(),
    )


def _check_names(c: _Problems, obs: pd.DataFrame) -> None:
    """Taxon names are expected as binomials (Genus species)."""
    # names: a binomial (Genus species) is expected
    tax = obs["taxon"]
    first = ~tax.duplicated() & (tax != "")
    nonbin = first & ~tax.str.match(_BINOMIAL)
    counts = tax.value_counts()
    c.add(
        nonbin,
        "warning",
        "taxon",
        "taxon-binomial",
        lambda i: f"taxon name is not a binomial 'Genus species' ({counts[tax.iat[i]]} row(s))",
        "use the scientific name; map reported names to accepted ones in taxa.csv",
    )


_DOI_PREFIX = re.compile(r"^\s*(?:(?:https?://)?(?:dx\.)?doi\.org/|doi:\s*)", re.I)


def normalise_doi(text: str) -> str:
    """A DOI as the bare name ``10.xxxx/...``: a ``https://doi.org/`` (or ``dx.doi.org``)
    URL and a ``doi:`` prefix are removed, once; anything else is kept as typed."""
    t = (text or "").strip()
    return _DOI_PREFIX.sub("", t, count=1).strip()


def normalise_dois(s: pd.Series) -> pd.Series:
    """:func:`normalise_doi` over a column of DOIs."""
    return map_distinct(s.fillna("").astype(str), normalise_doi)


STUB_CITATION_PREFIX = "NEEDS CITATION"  # how comparo import marks the stub sources it writes


def _source_problems(raw: RawTable) -> list[Problem]:
    probs: list[Problem] = []
    if "citation" in raw.frame:
        stub = raw.frame["citation"].str.startswith(STUB_CITATION_PREFIX).to_numpy(dtype=bool)
        for i in np.flatnonzero(stub):
            probs.append(
                Problem(
                    "warning",
                    raw.file,
                    raw.rows[i],
                    "citation",
                    raw.frame["source_id"].iat[i] if "source_id" in raw.frame else "",
                    "citation-stub",
                    "the citation is a stub written by comparo import",
                    "replace it with the full citation of the source",
                )
            )
    if "doi" not in raw.frame:
        return probs
    doi = normalise_dois(raw.frame["doi"])
    bad = (doi != "") & ~doi.str.match(_DOI)
    for i in np.flatnonzero(bad.to_numpy()):
        probs.append(
            Problem(
                "warning",
                raw.file,
                raw.rows[i],
                "doi",
                raw.frame["doi"].iat[i],
                "doi-format",
                f"{doi.iat[i]!r} does not look like a DOI (10.xxxx/...)",
                "a DOI starts with 10., a registrant code of 4-9 digits and '/' (a https://doi.org/ or doi: prefix is fine)",
            )
        )
    return probs


def _number(v: Any) -> bool:
    return isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)


def _settings_problems(settings: dict[str, Any], catalog: Catalog) -> list[Problem]:
    """Types and values of the settings that reading and harmonisation use (q10,
    activation_energy_kj_mol, conflict_factor, aggregate, quantities, title, seed)."""
    probs: list[Problem] = []

    def bad(key: str, value: Any, message: str, hint: str = "", severity: str = "error") -> None:
        probs.append(
            Problem(
                severity, "comparo.toml", None, key, str(value), "settings-value", message, hint
            )
        )

    for table, what, low, high, hint in (
        ("q10", "Q10", 0.0, 100.0, "typical biological Q10 is 2-3 (rule of thumb)"),
        (
            "activation_energy_kj_mol",
            "an activation energy in kJ/mol",
            0.0,
            1000.0,
            "muscle rate processes are of the order of 50-100 kJ/mol (rule of thumb)",
        ),
    ):
        given = settings.get(table, {})
        if not isinstance(given, dict):
            bad(
                table,
                given,
                f"[{table}] must be a table of quantity = number",
                f"for example [{table}] followed by attach_rate = 2.0",
            )
            continue
        for key, v in given.items():
            if key not in catalog:
                close = difflib.get_close_matches(key, list(catalog), n=1)
                bad(
                    f"{table}.{key}",
                    v,
                    f"{what} given for unknown quantity {key!r}",
                    f"did you mean {close[0]!r}?" if close else "use a catalogue key",
                )
            elif not _number(v) or not low < v <= high:
                bad(
                    f"{table}.{key}",
                    v,
                    f"{what} must be a number greater than {low:g} and at most {high:g}",
                    hint,
                )
            elif not catalog[key].temperature_sensitive:
                bad(
                    f"{table}.{key}",
                    v,
                    f"{key} is not temperature-sensitive; this value is ignored",
                    "",
                    "warning",
                )
    cf = settings.get("conflict_factor")
    if cf is not None and (not _number(cf) or cf <= 1):
        bad(
            "conflict_factor",
            cf,
            "conflict_factor must be a number greater than 1 (the ratio max/min above which two values of a taxon conflict)",
            "the default is 1.5 (common practice)",
        )
    agg = settings.get("aggregate")
    if agg is not None and agg not in ("mean", "median"):
        bad("aggregate", agg, 'aggregate must be "mean" or "median"')
    qs = settings.get("quantities")
    if qs is not None and not isinstance(qs, dict):
        bad(
            "quantities",
            qs,
            "[quantities] must hold one table per quantity key",
            'for example [quantities.twitch_time] followed by unit = "ms"',
        )
    title = settings.get("title")
    if title is not None and not isinstance(title, str):
        bad("title", title, "title must be text in quotes")
    seed = settings.get("seed")
    if seed is not None and (
        not isinstance(seed, int) or isinstance(seed, bool) or not 0 <= seed < 2**63
    ):
        bad("seed", seed, "seed must be a whole number from 0 to 2^63 - 1")
    return probs


# --------------------------------------------------------------------------- reserved names

# Columns comparo adds to the observation rows (validation, harmonisation, lineage).
RESERVED_OBSERVATION_COLUMNS = frozenset(
    {
        "row",
        "quantity_key",
        "value_canonical",
        "uncertainty_canonical",
        "unit_canonical",
        "basis_effective",
        "problem",
        "accepted",
        "u_h",
        "value_h",
        "temperature_factor",
        "temperature_note",
        "status",
        "reason",
        "merged_into",
        "value_harmonised",
        "u_standard",
        "q10_used",
        "ea_kj_mol_used",
        "temperature_rule",
        "value_temp_c",
    }
)
# Columns of the per-taxon table that are not quantities (a taxa.csv grouping column is copied into it).
RESERVED_TAXA_COLUMNS = frozenset({"temperature_c", "accepted", "own"})


def _reserved(name: str, fixed: frozenset[str], keys: frozenset[str]) -> bool:
    return (
        name in fixed
        or name.startswith("_")
        or name in keys
        or any(name.startswith(k + "_") for k in keys)
    )


def reserved_column_problems(raw: RawDataset, catalog: Catalog) -> list[Problem]:
    """Column names a user's table may not use because comparo adds a column of that
    name: in observations the columns listed in :data:`RESERVED_OBSERVATION_COLUMNS`; in
    taxa.csv (whose extra columns join the per-taxon table) any quantity, derived or
    ratio key, ``KEY_...`` for such a key and ``temperature_c``; in both, names starting
    with ``_``. Each is renamed ``NAME (yours)`` in the working copy so that checking
    goes on (the problem is an error: nothing is analysed until it is renamed)."""
    probs: list[Problem] = []
    derived = read_schema("derived.toml").get("keys", {})
    ratios = raw.settings.get("ratios") if isinstance(raw.settings.get("ratios"), dict) else {}
    keys = frozenset(catalog) | frozenset(derived) | frozenset(map(str, ratios))
    spec = read_schema("tables.toml")
    for table, fixed, scope in (
        (raw.observations, RESERVED_OBSERVATION_COLUMNS, frozenset()),
        (raw.taxa, RESERVED_TAXA_COLUMNS, keys),
    ):
        if table is None:
            continue
        own = spec["observations" if table is raw.observations else "taxa"]["columns"]
        clash = [c for c in table.frame.columns if c not in own and _reserved(str(c), fixed, scope)]
        for c in clash:
            probs.append(
                Problem(
                    "error",
                    table.file,
                    None,
                    str(c),
                    None,
                    "column-reserved",
                    f"column name {c!r} is used by comparo for a column of its own",
                    f"rename the column (for example to 'my_{str(c).lstrip('_')}')",
                )
            )
        if clash:
            table.frame = table.frame.rename(columns={c: f"{c} (yours)" for c in clash})
    return probs


# --------------------------------------------------------------------------- entry points


@dataclass
class Dataset:
    """A validated dataset folder.

    Attributes
    ----------
    observations : pandas.DataFrame
        The observation rows as typed (numbers parsed) plus, added by comparo:
        ``row`` (spreadsheet row), ``quantity_key`` (catalogue key the value is
        stored as, e.g. ``fiber_radius`` for a reported ``fiber_diameter``),
        ``value_canonical`` and ``uncertainty_canonical`` (in ``unit_canonical``,
        the catalogue's canonical unit) and ``basis_effective`` (``computed`` where
        comparo converted a diameter).
    sources, taxa : pandas.DataFrame
        Bibliography and the optional taxa table (``None`` when absent).
    tree : dendropy.Tree or None
    settings : dict
        Parsed comparo.toml (empty when absent).
    catalog : comparo.base.catalog.Catalog
    problems : pandas.DataFrame
        Warnings found while loading (and errors when loaded with ``strict=False``).
    """

    folder: Path
    observations: Any
    sources: Any
    taxa: Any
    tree: Any
    settings: dict[str, Any]
    catalog: Any
    problems: Any
    files: dict[str, Path]
    tree_text: str | None = None
    traces: Any = None  # comparo.reading.tables.RawTable of traces.csv, or None (reduced by comparo.traces.files)
    cache: dict[str, Any] = field(
        default_factory=dict, repr=False, compare=False
    )  # results computed once per load

    @property
    def rows_read(self) -> int:
        """Number of observation rows read (blank lines excluded)."""
        return len(self.observations)

    @property
    def reference_temperature_c(self) -> float:
        """Reference temperature in °C for normalising rates (settings, default 25; with
        ``reference_temperature_c = "operating"``, the fallback for taxa without an
        operating temperature, ``[temperature] fallback_c``)."""
        return temperature_policy(self.settings).reference_c

    @property
    def temperature_target(self) -> str:
        """What temperature-sensitive values are brought to: ``"25 °C"`` or
        ``"operating temperature"``."""
        return temperature_policy(self.settings).target_text


def validate(raw: RawDataset) -> tuple[Dataset | None, list[Problem]]:
    """Validate what :func:`comparo.reading.tables.read_folder` read.

    Returns the :class:`Dataset` (``None`` when a table could not be
    read at all) and every problem found; each observation row also carries
    ``problem`` (its first error, empty when none).
    """
    problems = list(raw.problems)
    try:
        extra = raw.settings.get("quantities")
        catalog = load_catalog(extra if isinstance(extra, dict) else None)
    except InputError as exc:
        problems += problems_from_frame(exc.problems)
        catalog = load_catalog()
    problems += _settings_problems(raw.settings, catalog)
    taxa_frame = raw.taxa.frame if raw.taxa is not None else None
    problems += temperature_settings_problems(raw.settings, catalog, taxa_frame)
    if raw.observations is None or raw.sources is None:
        return None, cell_coordinates(raw, problems)
    problems += reserved_column_problems(raw, catalog)
    problems += _column_problems(raw.observations, "observations")
    problems += _column_problems(raw.sources, "sources")
    problems += _source_problems(raw.sources)
    if raw.taxa is not None:
        problems += _column_problems(raw.taxa, "taxa")
    missing_cols = {
        p.column for p in problems if p.rule == "missing-column" and p.file == raw.observations.file
    }
    obs = _typed_observations(raw.observations)
    source_ids = set(raw.sources.frame["source_id"]) if "source_id" in raw.sources.frame else None
    if not missing_cols & {"quantity", "unit", "value"}:
        obs, p = _observation_problems(raw.observations, obs, catalog, source_ids, raw.settings)
        problems += p
    else:
        for c in ("quantity_key", "unit_canonical", "basis_effective"):
            obs[c] = ""
        obs["value_canonical"] = np.nan
        obs["uncertainty_canonical"] = np.nan
    first_error = {}
    for p in problems:
        if (
            p.severity == "error"
            and p.file == raw.observations.file
            and p.row is not None
            and p.row not in first_error
        ):
            first_error[p.row] = f"{p.rule}: {p.message}"
    obs["problem"] = [first_error.get(r, "") for r in obs["row"]]
    sources = raw.sources.frame.copy()
    if "doi" in sources:  # one form for links and exports: the bare 10.xxxx/... name
        sources["doi"] = normalise_dois(sources["doi"])
    taxa = None
    if raw.taxa is not None:
        taxa = raw.taxa.frame.copy()
        synonyms, p = resolve_synonyms(raw.taxa)
        problems += p
        if "accepted_name" in taxa:  # chains resolved to their end; names in a cycle stay unmapped
            taxa["accepted_name"] = [
                synonyms.get(t, "" if a != t else a)
                for t, a in zip(taxa["taxon"], taxa["accepted_name"], strict=True)
            ]
    ds = Dataset(
        folder=raw.folder,
        observations=obs,
        sources=sources,
        taxa=taxa,
        tree=raw.tree,
        settings=raw.settings,
        catalog=catalog,
        problems=None,
        files=raw.files,
        tree_text=raw.tree_text,
        traces=raw.traces,
    )
    return ds, cell_coordinates(raw, problems)


@dataclass(frozen=True)
class CheckResult:
    """Outcome of checking a dataset folder.

    Attributes
    ----------
    folder : str
    rows_read : int
        Observation rows read (blank lines are not rows).
    problems : pandas.DataFrame
        Every problem, errors first (columns of :data:`comparo.base.errors.PROBLEM_COLUMNS`).
    """

    folder: str
    rows_read: int
    problems: pd.DataFrame
    dataset: Dataset | None = None  # the validated dataset (None when unreadable)
    rows_from_traces: int = (
        0  # rows computed from the traces of traces.csv (counted once the table has no errors)
    )

    @property
    def n_errors(self) -> int:
        return int((self.problems["severity"] == "error").sum())

    @property
    def n_warnings(self) -> int:
        return int((self.problems["severity"] == "warning").sum())

    @property
    def n_notes(self) -> int:
        return int((self.problems["severity"] == "note").sum())

    @property
    def ok(self) -> bool:
        return self.n_errors == 0

    def to_dict(self) -> dict[str, Any]:
        recs = self.problems.astype(object).where(self.problems.notna(), None).to_dict("records")
        return {
            "folder": self.folder,
            "rows_read": self.rows_read,
            "rows_from_traces": self.rows_from_traces,
            "errors": self.n_errors,
            "warnings": self.n_warnings,
            "notes": self.n_notes,
            "problems": recs,
        }

    def to_frame(self) -> pd.DataFrame:
        return self.problems

    def _repr_html_(self) -> str:
        """Compact HTML for notebooks: the summary line and the first 20 problems."""
        import html

        shown = self.problems.head(20)[
            ["severity", "file", "row", "column", "value", "rule", "message"]
        ]
        more = f"<p>... and {len(self.problems) - 20} more</p>" if len(self.problems) > 20 else ""
        return (
            f"<p>{html.escape(self.summary())}</p>"
            + shown.to_html(index=False, escape=True, na_rep="")
            + more
        )

    def summary(self) -> str:
        verdict = "no errors" if self.ok else f"{self.n_errors} error(s)"
        traces = ""
        if self.rows_from_traces:
            traces = (
                f", and {self.rows_from_traces} computed from the traces of traces.csv "
                f"({self.rows_read + self.rows_from_traces} rows in all, as audit and the report count them)"
            )
        return f"{self.folder}: {self.rows_read} observation row(s) read{traces}; {verdict}, {self.n_warnings} warning(s), {self.n_notes} note(s)"


def require_dataset(ds: Any, name: str = "ds") -> Dataset:
    """*ds* when it is a :class:`Dataset`; else a UsageError saying how to make one."""
    from comparo.base.arguments import check_kind

    return check_kind(ds, Dataset, name, "a Dataset, such as comparo.load(FOLDER) returns")


def check(folder) -> CheckResult:
    """Validate a dataset folder and return every problem found (never raises for
    bad cells; raises :class:`~comparo.InputError` only when the folder itself is missing)."""
    raw = read_folder(folder)
    ds, problems = validate(raw)
    rows = len(raw.observations) if raw.observations is not None else 0
    frame = problems_frame(problems)
    if ds is not None:
        ds.problems = frame
    return CheckResult(str(folder), rows, frame, ds)
