"""The ``[derive]`` settings: defaults of schema/derived.toml, overridden and checked."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from comparo.base.errors import InputError, Problem
from comparo.derivation.permeability_models import PERMEABILITY_MODELS
from comparo.derivation.timescales import FREQUENCY_BOUNDS

_OPTIONAL_SETTINGS = {"fallback_temperature_c"}


_CHOICES = {
    "permeability_model": tuple(PERMEABILITY_MODELS),
    "effective_radius": ("volume_to_surface", "area_equivalent"),
    "modulus_fallback": ("elastic_modulus", "constrained", "none"),
    "frequency_bound": FREQUENCY_BOUNDS,
    "unknown_uncertainty": ("unknown", "ignore"),
}


def _settings(
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
