"""The parts of ``comparo.toml`` that later steps use, as far as no later room is needed.

Reading (:mod:`comparo.reading.tables`) only parses the TOML; validation checks the
catalogue and temperature settings. This module checks what needs no later room, so that
``comparo check`` reports it before ``derive``, ``fit`` or ``report`` would stop on it:
``[derive]``, ``[ratios]`` and ``[quantities]`` are tables, ``[[analysis]]`` and
``[[comparison]]`` lists of tables (:func:`settings_problems`). Each later step checks its
own settings: ``[derive]`` and ``[ratios]`` in :mod:`comparo.derivation.settings`,
``[[analysis]]`` and ``[[comparison]]`` in :mod:`comparo.fitting.declared`; the pipeline
(:mod:`comparo.pipeline`) composes them for ``check``.

:func:`derive_settings` assembles the mapping :func:`comparo.derive` takes;
:data:`DEFAULT_ANALYSES` are the fits run when none is declared.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from comparo.base.errors import InputError, Problem

#: Fits run when ``comparo.toml`` declares no ``[[analysis]]`` (kept when the columns exist).
DEFAULT_ANALYSES = (
    {"x": "body_mass", "y": "frequency_observed", "method": "sma"},
    {"x": "fiber_radius", "y": "frequency_observed", "method": "sma"},
    {"x": "frequency_kinetic_bound", "y": "frequency_observed", "method": "sma"},
    {"x": "frequency_hydraulic_bound", "y": "frequency_observed", "method": "sma"},
)


def settings_problem(column: str, value: Any, rule: str, message: str, hint: str = "") -> Problem:
    """An error of ``comparo.toml`` at *column* (the setting's dotted name); long values
    shortened to 120 characters."""
    shown = None if value is None else str(value)
    if shown is not None and len(shown) > 120:
        shown = shown[:117] + "..."
    return Problem("error", "comparo.toml", None, column, shown, rule, message, hint)


def table_problems(settings: Mapping[str, Any]) -> list[Problem]:
    """``derive``, ``ratios`` and ``quantities`` must be TOML tables, ``analysis`` and
    ``comparison`` lists of tables."""
    probs = []
    for key, what in (
        ("derive", "[derive]"),
        ("ratios", "[ratios]"),
        ("quantities", "[quantities.NAME]"),
    ):
        if key in settings and not isinstance(settings[key], Mapping):
            probs.append(
                settings_problem(
                    key,
                    settings[key],
                    "settings-type",
                    f"{key} must be a table ({what} section), not {type(settings[key]).__name__}",
                    f"write it as a section: {what} followed by name = value lines",
                )
            )
    declared = settings.get("analysis")
    if declared is not None and not (
        isinstance(declared, list) and all(isinstance(a, Mapping) for a in declared)
    ):
        probs.append(
            settings_problem(
                "analysis",
                declared,
                "settings-type",
                "analysis must be a list of tables, one [[analysis]] section per fit",
                '[[analysis]] then x = "body_mass", y = "frequency_observed", method = "sma"',
            )
        )
    declared = settings.get("comparison")
    if declared is not None and not (
        isinstance(declared, list) and all(isinstance(c, Mapping) for c in declared)
    ):
        probs.append(
            settings_problem(
                "comparison",
                declared,
                "settings-type",
                "comparison must be a list of tables, one [[comparison]] section per comparison",
                '[[comparison]] then y = "frequency_observed", models = [["body_mass"], '
                '["frequency_kinetic_bound"]]',
            )
        )
    return probs


def derive_settings(settings: Mapping[str, Any] | None) -> dict[str, Any]:
    """The mapping :func:`comparo.derive` takes, assembled from a dataset's ``comparo.toml``.

    Raises
    ------
    InputError
        When ``[derive]``, ``[ratios]`` or ``[quantities]`` is not a table.
    """
    settings = settings or {}
    probs = [p for p in table_problems(settings) if p.column not in ("analysis", "comparison")]
    if probs:
        raise InputError(probs)
    return {
        **settings.get("derive", {}),
        "ratios": settings.get("ratios", {}),
        "quantities": settings.get("quantities", {}),
    }


def known_quantities(catalog) -> dict[str, str]:
    """Quantity key -> canonical unit, for catalogue and derived keys."""
    from comparo.base.catalog import read_schema

    known = {k: catalog.target(k).unit for k in catalog}
    for k, spec in read_schema("derived.toml").get("keys", {}).items():
        known.setdefault(k, spec.get("unit", "dimensionless"))
    return known


def settings_problems(settings: Mapping[str, Any]) -> list[Problem]:
    """The problems of ``comparo.toml`` that need no later room: ``[derive]`` and
    ``[ratios]`` must be tables, ``[[analysis]]`` and ``[[comparison]]`` lists of tables
    (``[quantities]`` is checked by validation: the catalogue is built from it). The
    settings of each later step are checked by that step
    (:func:`comparo.derivation.settings.settings_problems`,
    :func:`comparo.fitting.declared.settings_problems`) when :func:`later_checkable`."""
    return [p for p in table_problems(settings or {}) if p.column != "quantities"]


def later_checkable(settings: Mapping[str, Any], problems: list[Problem]) -> bool:
    """Whether the later steps can check their own settings: ``[derive]``, ``[ratios]`` and
    ``[quantities]`` are tables (*problems* are those of :func:`settings_problems`)."""
    return not any(p.column in ("derive", "ratios") for p in problems) and isinstance(
        (settings or {}).get("quantities", {}), Mapping
    )
