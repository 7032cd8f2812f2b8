"""What the matched headers of a wide table decided, checked: units against each
quantity's kind, one column per role, every trait with a source, each spread paired with
its trait."""

from __future__ import annotations

from comparo.base.catalog import Catalog
from comparo.base.errors import Problem
from comparo.reading.headers import (
    UNCERTAINTY_ROLES,
    Column,
)
from comparo.reading.sheets import Grid

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
                        + ", ".join(repr(x.header) for x in cols),
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
                "role-twice",
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
                    "role-twice",
                    f"{len(cols)} {group} columns for {key}: "
                    + ", ".join(repr(c.header) for c in cols),
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
