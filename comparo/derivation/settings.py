"""The ``[derive]`` settings: defaults of schema/derived.toml, overridden and checked.

:func:`settings_problems` is the derivation room's check of its own settings (``[derive]``
and the ``[ratios]`` expressions: :func:`ratio_problems`) for ``comparo check``; the
pipeline (:mod:`comparo.pipeline`) calls it."""

from __future__ import annotations

import difflib
import math
from collections.abc import Mapping
from typing import Any

from comparo.base.errors import InputError, Problem, problems_from_frame
from comparo.derivation.expressions import parse_ratio, ratio_overflow
from comparo.derivation.permeability_models import PERMEABILITY_MODELS
from comparo.derivation.timescales import FREQUENCY_BOUNDS
from comparo.validation.settings import known_quantities, settings_problem

_OPTIONAL_SETTINGS = {"fallback_temperature_c"}


_CHOICES = {
    "permeability_model": tuple(PERMEABILITY_MODELS),
    "effective_radius": ("volume_to_surface", "area_equivalent"),
    "modulus_fallback": ("elastic_modulus", "constrained", "none"),
    "frequency_bound": FREQUENCY_BOUNDS,
    "unknown_uncertainty": ("unknown", "ignore"),
}


def settings_with_defaults(
    given: Mapping[str, Any] | None,
) -> tuple[dict[str, Any], dict[str, Any], dict[str, Any]]:
    """Defaults of schema/derived.toml overridden by *given*; returns (settings, ratios,
    quantities)."""
    from comparo.base.catalog import read_schema

    defaults = dict(read_schema("derived.toml")["settings"])
    given = dict(given or {})
    ratios = given.pop("ratios", {}) or {}
    quantities = given.pop("quantities", {}) or {}
    probs: list[Problem] = []

    def bad(key: str, value: Any, msg: str, hint: str = "") -> None:
        probs.append(
            Problem(
                "error",
                "comparo.toml",
                None,
                f"derive.{key}",
                None if value is None else str(value),
                "derive-setting",
                msg,
                hint,
            )
        )

    out = dict(defaults)
    for key, value in given.items():
        if key not in defaults and key not in _OPTIONAL_SETTINGS:
            bad(
                key,
                value,
                f"unknown derive setting {key!r}",
                f"known settings: {', '.join(sorted(set(defaults) | _OPTIONAL_SETTINGS))}",
            )
            continue
        if key in _CHOICES:
            if value not in _CHOICES[key]:
                bad(key, value, f"{key} must be one of {', '.join(_CHOICES[key])}")
                continue
        elif key == "length":
            if not isinstance(value, str) or not value:
                bad(key, value, "length must name a length quantity, e.g. 'fiber_radius'")
                continue
        elif key == "thin_per_thick":
            if isinstance(value, str):
                pass  # a column of the table holding the number per taxon
            elif not isinstance(value, int | float) or isinstance(value, bool) or value < 0:
                bad(
                    key,
                    value,
                    "thin_per_thick must be a number (2 or 3) or the name of a taxa column",
                )
                continue
        else:
            if (
                not isinstance(value, int | float)
                or isinstance(value, bool)
                or not math.isfinite(value)
            ):
                bad(key, value, f"{key} must be a number")
                continue
            allow_zero = (
                key.endswith("_u_nm") or key.endswith("_u") or key == "fallback_temperature_c"
            )
            if key == "poisson_ratio":
                if not -1.0 < value < 0.5:
                    bad(key, value, "poisson_ratio must lie in (-1, 0.5)")
                    continue
            elif key != "fallback_temperature_c" and (value < 0 or (value == 0 and not allow_zero)):
                bad(key, value, f"{key} must be positive")
                continue
        out[key] = value
    if not isinstance(ratios, Mapping):
        bad("ratios", ratios, '[ratios] must be a table of name = "expression"')
        ratios = {}
    if probs:
        raise InputError(probs)
    return out, dict(ratios), dict(quantities)


# --------------------------------------------------------------------------- checks for check


def settings_problems(settings: Mapping[str, Any], catalog) -> list[Problem]:
    """Every problem of the ``[derive]`` and ``[ratios]`` settings of ``comparo.toml`` (the
    derivation room's own settings, for ``comparo check``): unknown names, bad choices
    and ranges (:func:`comparo.derive` raises the same), and :func:`ratio_problems`.
    *settings* must have ``[derive]``, ``[ratios]`` and ``[quantities]`` as tables
    (:func:`comparo.validation.settings.later_checkable`)."""
    from comparo.validation.settings import derive_settings

    probs: list[Problem] = []
    try:
        settings_with_defaults(derive_settings(settings))
    except InputError as exc:
        probs += problems_from_frame(exc.problems)
    return probs + ratio_problems(settings.get("ratios", {}), catalog)


def ratio_problems(ratios: Mapping[str, Any], catalog) -> list[Problem]:
    """Problems of the ``[ratios]`` expressions that need no data: syntax, unknown
    quantities, names taken, and values that would leave the range of a double
    (1e-307..1e307) somewhere inside the plausible ranges of their quantities."""
    known = known_quantities(catalog)
    probs: list[Problem] = []
    for name, spec in ratios.items():
        expr = spec.get("expression") if isinstance(spec, Mapping) else spec
        col = f"ratios.{name}"
        if name in known:
            probs.append(
                settings_problem(
                    col,
                    expr,
                    "ratio-expression",
                    f"ratio name {name!r} is already a quantity",
                    "choose another name",
                )
            )
            continue
        try:
            ratio = parse_ratio(str(name), expr)
        except (ValueError, OverflowError, ZeroDivisionError) as exc:
            probs.append(
                settings_problem(
                    col,
                    expr,
                    "ratio-expression",
                    f"cannot read the expression of ratio {name!r}: {exc}",
                    "use quantity keys with *, /, ^number and parentheses, e.g. "
                    "fiber_length / fiber_radius",
                )
            )
            continue
        unknown = [k for k, _ in ratio.exponents if k not in known]
        for k in unknown:
            close = difflib.get_close_matches(k, list(known), n=1)
            probs.append(
                settings_problem(
                    col,
                    expr,
                    "ratio-expression",
                    f"ratio {name!r} uses {k!r}, which is neither a catalogue nor a derived "
                    "quantity",
                    f"did you mean {close[0]!r}?" if close else "comparo units lists the keys",
                )
            )
        if unknown or not ratio.exponents:
            continue
        span = ratio_overflow(ratio, catalog)
        if span:
            probs.append(settings_problem(col, expr, "ratio-overflow", span, "use smaller powers"))
    return probs
