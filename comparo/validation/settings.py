"""The parts of ``comparo.toml`` that later steps use, checked once and up front.

Reading (:mod:`comparo.reading.tables`) only parses the TOML; harmonisation checks its own
settings (q10, conflict_factor, ...). This module checks the settings of the later
steps so that ``comparo check`` can report them before ``derive``, ``fit`` or
``report`` would stop on them:

* ``[derive]``: names, choices and ranges (defaults of :func:`comparo.derive`, schema/derived.toml);
* ``[ratios]``: each expression parsed, its quantities known, and its values kept
  inside the range of a double over the plausible ranges of its quantities;
* ``[[analysis]]``: each fit a table with ``x`` and ``y`` naming quantities, a known
  ``method``, a ``by`` column that exists and a finite ``against`` (old name ``test_slope``);
* ``[[comparison]]``: each model comparison a table with ``y`` a quantity, ``models`` a list
  of at least two distinct lists of quantities, ``method`` ols or pgls, an optional
  ``factor`` column of taxa.csv and an optional ``name``.

:func:`settings_problems` is the gate hook (``comparo check``); :func:`derive_settings`
and :func:`analyses` are what ``derive`` and ``report`` call, raising the same problems.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Mapping
from typing import Any

from comparo.base.errors import InputError, Problem, problems_from_frame

#: Keys one ``[[analysis]]`` entry may hold.
ANALYSIS_KEYS = (
    "x",
    "y",
    "method",
    "by",
    "against",
    "test_slope",
)  # test_slope: the old name of against

#: Keys one ``[[comparison]]`` entry may hold.
COMPARISON_KEYS = ("y", "models", "method", "factor", "name")

#: Fits run when ``comparo.toml`` declares no ``[[analysis]]`` (kept when the columns exist).
DEFAULT_ANALYSES = (
    {"x": "body_mass", "y": "frequency_observed", "method": "sma"},
    {"x": "fiber_radius", "y": "frequency_observed", "method": "sma"},
    {"x": "frequency_kinetic_bound", "y": "frequency_observed", "method": "sma"},
    {"x": "frequency_hydraulic_bound", "y": "frequency_observed", "method": "sma"},
)


def _problem(column: str, value: Any, rule: str, message: str, hint: str = "") -> Problem:
    shown = None if value is None else str(value)
    if shown is not None and len(shown) > 120:
        shown = shown[:117] + "..."
    return Problem("error", "comparo.toml", None, column, shown, rule, message, hint)


def _table_problems(settings: Mapping[str, Any]) -> list[Problem]:
    """``derive``, ``ratios`` and ``quantities`` must be TOML tables, ``analysis`` a list of tables."""
    probs = []
    for key, what in (
        ("derive", "[derive]"),
        ("ratios", "[ratios]"),
        ("quantities", "[quantities.NAME]"),
    ):
        if key in settings and not isinstance(settings[key], Mapping):
            probs.append(
                _problem(
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
            _problem(
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
            _problem(
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
    probs = [p for p in _table_problems(settings) if p.column not in ("analysis", "comparison")]
    if probs:
        raise InputError(probs)
    return {
        **settings.get("derive", {}),
        "ratios": settings.get("ratios", {}),
        "quantities": settings.get("quantities", {}),
    }


def _known_quantities(catalog) -> dict[str, str]:
    """Quantity key -> canonical unit, for catalogue and derived keys."""
    from comparo.base.catalog import read_schema

    known = {k: catalog.target(k).unit for k in catalog}
    for k, spec in read_schema("derived.toml").get("keys", {}).items():
        known.setdefault(k, spec.get("unit", "dimensionless"))
    return known


def ratio_problems(ratios: Mapping[str, Any], catalog) -> list[Problem]:
    """Problems of the ``[ratios]`` expressions that need no data: syntax, unknown
    quantities, names taken, and values that would leave the range of a double
    (1e-307..1e307) somewhere inside the plausible ranges of their quantities."""
    from comparo.derivation import parse_ratio, ratio_overflow

    known = _known_quantities(catalog)
    probs: list[Problem] = []
    for name, spec in ratios.items():
        expr = spec.get("expression") if isinstance(spec, Mapping) else spec
        col = f"ratios.{name}"
        if name in known:
            probs.append(
                _problem(
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
                _problem(
                    col,
                    expr,
                    "ratio-expression",
                    f"cannot read the expression of ratio {name!r}: {exc}",
                    "use quantity keys with *, /, ^number and parentheses, e.g. fiber_length / fiber_radius",
                )
            )
            continue
        unknown = [k for k, _ in ratio.exponents if k not in known]
        for k in unknown:
            close = difflib.get_close_matches(k, list(known), n=1)
            probs.append(
                _problem(
                    col,
                    expr,
                    "ratio-expression",
                    f"ratio {name!r} uses {k!r}, which is neither a catalogue nor a derived quantity",
                    f"did you mean {close[0]!r}?" if close else "comparo units lists the keys",
                )
            )
        if unknown or not ratio.exponents:
            continue
        span = ratio_overflow(ratio, catalog)
        if span:
            probs.append(_problem(col, expr, "ratio-overflow", span, "use smaller powers"))
    return probs


def _analysis_problems(
    i: int, a: Mapping[str, Any], quantities: set[str], columns: set[str] | None
) -> list[Problem]:
    from comparo.fitting import METHODS

    probs = []
    where = f"analysis[{i + 1}]"
    for key in a:
        if key not in ANALYSIS_KEYS:
            close = difflib.get_close_matches(str(key), ANALYSIS_KEYS, n=1)
            probs.append(
                _problem(
                    f"{where}.{key}",
                    a[key],
                    "analysis-setting",
                    f"unknown key {key!r} in an [[analysis]] entry",
                    f"did you mean {close[0]!r}?"
                    if close
                    else f"known keys: {', '.join(ANALYSIS_KEYS)}",
                )
            )
    for axis in ("x", "y"):
        v = a.get(axis)
        if v is None:
            probs.append(
                _problem(
                    f"{where}.{axis}",
                    None,
                    "analysis-setting",
                    f"an [[analysis]] entry needs {axis}",
                    f'{axis} = "body_mass" (a quantity key)',
                )
            )
        elif not isinstance(v, str) or v not in quantities:
            close = difflib.get_close_matches(str(v), sorted(quantities), n=1)
            probs.append(
                _problem(
                    f"{where}.{axis}",
                    v,
                    "analysis-setting",
                    f"{axis} must name a quantity (catalogue, derived or ratio key)",
                    f"did you mean {close[0]!r}?" if close else "comparo units lists the keys",
                )
            )
    method = a.get("method", "sma")
    if method not in METHODS:
        probs.append(
            _problem(
                f"{where}.method",
                method,
                "analysis-setting",
                f"method must be one of {', '.join(METHODS)}",
            )
        )
    by = a.get("by")
    if by is not None and (not isinstance(by, str) or (columns is not None and by not in columns)):
        probs.append(
            _problem(
                f"{where}.by",
                by,
                "analysis-setting",
                "by must name a column of taxa.csv",
                f"columns: {', '.join(sorted(columns))}"
                if columns
                else "add the column to taxa.csv",
            )
        )
    for key in ("against", "test_slope"):
        ts = a.get(key)
        if ts is not None and (
            isinstance(ts, bool) or not isinstance(ts, int | float) or not math.isfinite(ts)
        ):
            probs.append(
                _problem(f"{where}.{key}", ts, "analysis-setting", f"{key} must be a finite number")
            )
    return probs


def analysis_problems(
    settings: Mapping[str, Any], catalog, taxa_columns: set[str] | None = None
) -> list[Problem]:
    """Problems of the ``[[analysis]]`` entries (empty when there are none)."""
    declared = settings.get("analysis")
    if not isinstance(declared, list) or not all(isinstance(a, Mapping) for a in declared):
        return []
    ratios = settings.get("ratios")
    quantities = set(_known_quantities(catalog)) | (
        set(ratios) if isinstance(ratios, Mapping) else set()
    )
    probs: list[Problem] = []
    for i, a in enumerate(declared):
        probs += _analysis_problems(i, a, quantities, taxa_columns)
    return probs


def _comparison_problems(
    i: int, c: Mapping[str, Any], quantities: set[str], columns: set[str] | None
) -> list[Problem]:
    from comparo.fitting.multiple import MULTIPLE_METHODS

    probs = []
    where = f"comparison[{i + 1}]"
    for key in c:
        if key not in COMPARISON_KEYS:
            close = difflib.get_close_matches(str(key), COMPARISON_KEYS, n=1)
            probs.append(
                _problem(
                    f"{where}.{key}",
                    c[key],
                    "comparison-setting",
                    f"unknown key {key!r} in a [[comparison]] entry",
                    f"did you mean {close[0]!r}?"
                    if close
                    else f"known keys: {', '.join(COMPARISON_KEYS)}",
                )
            )

    def quantity(col: str, v: Any, what: str) -> None:
        if not isinstance(v, str) or v not in quantities:
            close = difflib.get_close_matches(str(v), sorted(quantities), n=1)
            probs.append(
                _problem(
                    col,
                    v,
                    "comparison-setting",
                    f"{what} must name a quantity (catalogue, derived or ratio key)",
                    f"did you mean {close[0]!r}?" if close else "comparo units lists the keys",
                )
            )

    if c.get("y") is None:
        probs.append(
            _problem(
                f"{where}.y",
                None,
                "comparison-setting",
                "a [[comparison]] entry needs y",
                'y = "frequency_observed" (a quantity key)',
            )
        )
    else:
        quantity(f"{where}.y", c["y"], "y")
    models = c.get("models")
    example = 'models = [["body_mass"], ["frequency_kinetic_bound"], ["frequency_kinetic_bound", "body_mass"]]'
    if (
        not isinstance(models, list)
        or len(models) < 2
        or not all(isinstance(m, list) for m in models)
    ):
        probs.append(
            _problem(
                f"{where}.models",
                models,
                "comparison-setting",
                "models must be a list of at least two models, each a list of predictor keys "
                "([] for the intercept-only model)",
                example,
            )
        )
    else:
        seen: dict[frozenset, int] = {}
        for j, m in enumerate(models):
            for v in m:
                quantity(f"{where}.models[{j + 1}]", v, "each predictor")
            key = frozenset(map(str, m))
            if len(key) < len(m):
                probs.append(
                    _problem(
                        f"{where}.models[{j + 1}]",
                        m,
                        "comparison-setting",
                        "a model names a predictor twice",
                    )
                )
            elif key in seen:
                probs.append(
                    _problem(
                        f"{where}.models[{j + 1}]",
                        m,
                        "comparison-setting",
                        f"model {j + 1} repeats model {seen[key] + 1}",
                    )
                )
            seen.setdefault(key, j)
    method = c.get("method", "ols")
    if method not in MULTIPLE_METHODS:
        probs.append(
            _problem(
                f"{where}.method",
                method,
                "comparison-setting",
                f"method must be one of {', '.join(MULTIPLE_METHODS)} (model comparison by "
                "maximum likelihood)",
            )
        )
    factor = c.get("factor")
    if factor is not None and (
        not isinstance(factor, str) or (columns is not None and factor not in columns)
    ):
        probs.append(
            _problem(
                f"{where}.factor",
                factor,
                "comparison-setting",
                "factor must name a column of taxa.csv",
                f"columns: {', '.join(sorted(columns))}"
                if columns
                else "add the column to taxa.csv",
            )
        )
    name = c.get("name")
    if name is not None and (not isinstance(name, str) or not name.strip()):
        probs.append(
            _problem(f"{where}.name", name, "comparison-setting", "name must be a non-empty text")
        )
    return probs


def comparison_problems(
    settings: Mapping[str, Any], catalog, taxa_columns: set[str] | None = None
) -> list[Problem]:
    """Problems of the ``[[comparison]]`` entries (empty when there are none)."""
    declared = settings.get("comparison")
    if not isinstance(declared, list) or not all(isinstance(c, Mapping) for c in declared):
        return []
    ratios = settings.get("ratios")
    quantities = set(_known_quantities(catalog)) | (
        set(ratios) if isinstance(ratios, Mapping) else set()
    )
    probs: list[Problem] = []
    for i, c in enumerate(declared):
        probs += _comparison_problems(i, c, quantities, taxa_columns)
    return probs


def comparisons(
    settings: Mapping[str, Any] | None, catalog=None, taxa_columns: set[str] | None = None
) -> list[dict]:
    """The ``[[comparison]]`` entries to run (dicts with y, models, method, factor, name), in
    order. Raises :class:`InputError` for a bad entry (as ``check`` reports)."""
    settings = settings or {}
    probs = [p for p in _table_problems(settings) if p.column == "comparison"]
    if catalog is not None and not probs:
        probs += comparison_problems(settings, catalog, taxa_columns)
    if probs:
        raise InputError(probs)
    return [dict(c) for c in settings.get("comparison") or []]


def analyses(
    settings: Mapping[str, Any] | None, table, catalog=None, taxa_columns: set[str] | None = None
) -> tuple[list[dict], str]:
    """The fits to run: the ``[[analysis]]`` entries, else the default set whose columns exist.

    Returns the list of fits (dicts with x, y, method, by, against) and a phrase saying
    where they came from. Raises :class:`InputError` for a bad entry (as ``check`` reports).
    """
    settings = settings or {}
    probs = [p for p in _table_problems(settings) if p.column == "analysis"]
    if catalog is not None:
        probs += analysis_problems(settings, catalog, taxa_columns)
    if probs:
        raise InputError(probs)
    declared = settings.get("analysis") or []
    if declared:
        return [dict(a) for a in declared], "declared in comparo.toml"
    chosen = [dict(a) for a in DEFAULT_ANALYSES if a["x"] in table and a["y"] in table]
    return chosen, "default set (comparo.toml declares no [[analysis]])"


def settings_problems(ds) -> list[Problem]:
    """Gate hook: every problem of the derive, ratio and analysis settings of a dataset."""
    from comparo.derivation.settings import _settings

    settings = ds.settings or {}
    # [quantities] is checked by validation (the catalogue is built from it)
    probs = [p for p in _table_problems(settings) if p.column != "quantities"]
    if any(p.column in ("derive", "ratios") for p in probs) or not isinstance(
        settings.get("quantities", {}), Mapping
    ):
        return probs
    try:
        _settings(derive_settings(settings))
    except InputError as exc:
        probs += problems_from_frame(exc.problems)
    probs += ratio_problems(settings.get("ratios", {}), ds.catalog)
    taxa_columns = set(ds.taxa.columns) if ds.taxa is not None else set()
    probs += analysis_problems(settings, ds.catalog, taxa_columns)
    probs += comparison_problems(settings, ds.catalog, taxa_columns)
    from comparo.validation.imputing import impute_problems

    probs += impute_problems(settings, ds.catalog)
    return probs
