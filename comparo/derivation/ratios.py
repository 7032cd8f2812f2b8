"""Columns of the user ratios of ``[ratios]``: parsed, their units checked, propagated as the
derived keys are.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.errors import InputError, Problem
from comparo.derivation.expressions import Ratio, parse_ratio, ratio_overflow
from comparo.derivation.lineage import (
    column,
    join_reasons,
    lineage_columns,
    mc_columns,
    text_column,
)
from comparo.derivation.uncertainty import propagate

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")


def ratios(
    out: pd.DataFrame,
    ratio_settings: Mapping[str, Any],
    catalog,
    keys,
    mc: int,
    rng: np.random.Generator,
    ignore_unknown: bool,
) -> tuple[dict[str, Any], dict[str, str]]:
    """Columns of the user ratios of ``[ratios]`` (GUM and Monte Carlo as for derived keys)."""
    parsed = _parsed_ratios(out, ratio_settings, catalog, keys)
    cols: dict[str, Any] = {}
    units: dict[str, str] = {}
    for ratio, _op_units, factor, unit_out in parsed:
        leaves, rel_u, basis, obs, reasons = {}, {}, {}, {}, []
        for k, _p in ratio.exponents:
            x = column(out, k)
            ok = np.isfinite(x) & (x > 0)
            reasons.append(
                np.where(np.isnan(x), f"no {k}", np.where(ok, "", f"{k} not positive")).astype(
                    object
                )
            )
            x = np.where(ok, x, np.nan)
            u = column(out, f"{k}_u")
            with np.errstate(divide="ignore", invalid="ignore"):
                rel_u[k] = np.where(np.isfinite(u) & (u >= 0), u / x, np.nan)
            leaves[k] = x
            basis[k] = text_column(out, f"{k}_basis")
            obs[k] = text_column(out, f"{k}_obs")
        const = ratio.constant * factor

        def compute(L, _ratio=ratio, _const=const):
            y = _const
            for k, p in _ratio.exponents:
                y = y * L[k] ** p
            return {_ratio.name: y}

        prop = propagate(compute, leaves, rel_u, ignore_unknown, mc, rng)
        name = ratio.name
        y = prop.values[name]
        cols[name] = y
        cols[f"{name}_u"] = prop.u[name]
        cols.update(
            lineage_columns(
                name,
                y,
                prop,
                basis,
                obs,
                {k: k for k in leaves},
                join_reasons(*reasons),
                f"{ratio.expression} [{unit_out}]",
            )
        )
        if mc > 0:
            cols.update(mc_columns(name, prop.mc[name], prop.u[name], 1.0))
        units[name] = unit_out
    return cols, units


def _parsed_ratios(
    out: pd.DataFrame, ratio_settings: Mapping[str, Any], catalog, keys
) -> list[tuple[Ratio, dict[str, str], float, str]]:
    """Each ratio of ``[ratios]`` read and checked: (ratio, unit of each operand, factor to the
    ratio's unit, that unit). Every problem of every ratio at once (exit 2)."""
    from comparo.base.units import conversion_factor, parse_unit

    probs: list[Problem] = []
    parsed: list[tuple[Ratio, dict[str, str], float, str]] = []
    for name, spec in ratio_settings.items():
        expr, unit = (
            (spec.get("expression"), spec.get("unit"))
            if isinstance(spec, Mapping)
            else (spec, None)
        )

        def bad(msg: str, hint: str = "", _name=name, _expr=expr) -> None:
            probs.append(
                Problem(
                    "error",
                    "comparo.toml",
                    None,
                    f"ratios.{_name}",
                    None if _expr is None else str(_expr),
                    "ratio-expression",
                    msg,
                    hint,
                )
            )

        if not _NAME.fullmatch(str(name)):
            bad(f"ratio name {name!r} must be letters, digits and underscores")
            continue
        if name in out.columns or name in keys or name in catalog:
            bad(f"ratio name {name!r} is already a quantity or column", "choose another name")
            continue
        try:
            ratio = parse_ratio(name, expr)
        except ValueError as exc:
            bad(
                f"cannot read the expression of ratio {name!r}: {exc}",
                "use quantity keys with *, /, ^number and parentheses, e.g. fiber_length / "
                "fiber_radius",
            )
            continue
        op_units: dict[str, str] = {}
        for k, _p in ratio.exponents:
            if k in keys and k != "regime":
                op_units[k] = keys[k]["unit"]
            elif k in catalog:
                op_units[k] = catalog.target(k).unit
            else:
                bad(
                    f"ratio {name!r} uses {k!r}, which is neither a catalogue nor a derived "
                    f"quantity"
                )
        if not ratio.exponents:
            bad(f"ratio {name!r} has no quantity in it")
        if len(op_units) != len(ratio.exponents):
            continue
        span = ratio_overflow(ratio, catalog)
        if span:
            bad(span, "use smaller powers")
            continue
        q = parse_unit("dimensionless")
        for k, p in ratio.exponents:
            q = q * parse_unit(op_units[k]) ** p
        base = q.to_base_units()
        if unit is None:
            unit_out = "dimensionless" if base.dimensionless else str(base.units)
        else:
            try:
                if parse_unit(str(unit)).dimensionality != base.dimensionality:
                    bad(
                        f"ratio {name!r} has dimension {base.dimensionality} but unit {unit!r} has "
                        f"{parse_unit(str(unit)).dimensionality}"
                    )
                    continue
            except ValueError as exc:
                bad(f"ratio {name!r}: {exc}")
                continue
            unit_out = str(unit)
        factor = float(base.magnitude) * conversion_factor(
            "dimensionless" if base.dimensionless else str(base.units), unit_out
        )
        parsed.append((ratio, op_units, factor, unit_out))
    if probs:
        raise InputError(probs)
    return parsed
