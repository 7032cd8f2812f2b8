"""The fits a dataset declares in ``comparo.toml`` (``[[analysis]]``, ``[[comparison]]``),
checked by the fitting room itself.

* ``[[analysis]]``: each fit a table with ``x`` and ``y`` naming quantities, a known
  ``method``, a ``by`` column that exists and a finite ``against`` (old name
  ``test_slope``);
* ``[[comparison]]``: each model comparison a table with ``y`` a quantity, ``models`` a list
  of at least two distinct lists of quantities, ``method`` ols or pgls, an optional
  ``factor`` column of taxa.csv and an optional ``name``.

:func:`settings_problems` takes the settings, the catalogue and the taxa.csv columns and
returns every problem, for ``comparo check`` (the pipeline composes it with the other
rooms' checks); :func:`analyses` and :func:`comparisons` are what ``report`` and
``compare`` call, raising the same problems.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Callable, Mapping
from typing import Any

from comparo.base.errors import InputError, Problem
from comparo.validation.settings import (
    DEFAULT_ANALYSES,
    known_quantities,
    settings_problem,
    table_problems,
)

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


def _unknown_keys(
    where: str, entry: Mapping[str, Any], known: tuple[str, ...], rule: str, what: str
) -> list[Problem]:
    """A problem for each key of *entry* (at *where*) not in *known*, with the closest."""
    probs = []
    for key in entry:
        if key not in known:
            close = difflib.get_close_matches(str(key), known, n=1)
            probs.append(
                settings_problem(
                    f"{where}.{key}",
                    entry[key],
                    rule,
                    f"unknown key {key!r} in {what} entry",
                    f"did you mean {close[0]!r}?" if close else f"known keys: {', '.join(known)}",
                )
            )
    return probs


def _analysis_problems(
    i: int, a: Mapping[str, Any], quantities: set[str], columns: set[str] | None
) -> list[Problem]:
    from comparo.fitting.core import METHODS

    where = f"analysis[{i + 1}]"
    probs = _unknown_keys(where, a, ANALYSIS_KEYS, "analysis-setting", "an [[analysis]]")
    for axis in ("x", "y"):
        v = a.get(axis)
        if v is None:
            probs.append(
                settings_problem(
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
                settings_problem(
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
            settings_problem(
                f"{where}.method",
                method,
                "analysis-setting",
                f"method must be one of {', '.join(METHODS)}",
            )
        )
    by = a.get("by")
    if by is not None and (not isinstance(by, str) or (columns is not None and by not in columns)):
        probs.append(
            settings_problem(
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
                settings_problem(
                    f"{where}.{key}", ts, "analysis-setting", f"{key} must be a finite number"
                )
            )
    return probs


def _entries_problems(
    settings: Mapping[str, Any],
    key: str,
    catalog,
    taxa_columns: set[str] | None,
    check: Callable[..., list[Problem]],
) -> list[Problem]:
    """*check* ``(i, entry, quantities, taxa_columns)`` run on each entry of the list of
    tables *key* (empty when it is not one), the quantities being the catalogue's, the
    derived and the ``[ratios]`` keys."""
    declared = settings.get(key)
    if not isinstance(declared, list) or not all(isinstance(a, Mapping) for a in declared):
        return []
    ratios = settings.get("ratios")
    quantities = set(known_quantities(catalog)) | (
        set(ratios) if isinstance(ratios, Mapping) else set()
    )
    probs: list[Problem] = []
    for i, entry in enumerate(declared):
        probs += check(i, entry, quantities, taxa_columns)
    return probs


def analysis_problems(
    settings: Mapping[str, Any], catalog, taxa_columns: set[str] | None = None
) -> list[Problem]:
    """Problems of the ``[[analysis]]`` entries (empty when there are none)."""
    return _entries_problems(settings, "analysis", catalog, taxa_columns, _analysis_problems)


def _models_problems(
    where: str, models: Any, quantity: Callable[[str, Any, str], None]
) -> list[Problem]:
    """Problems of the ``models`` of one ``[[comparison]]`` entry (at *where*): at least two
    distinct lists of predictors, each a quantity (*quantity* reports one that is not)."""
    probs: list[Problem] = []
    example = (
        'models = [["body_mass"], ["frequency_kinetic_bound"], '
        '["frequency_kinetic_bound", "body_mass"]]'
    )
    if (
        not isinstance(models, list)
        or len(models) < 2
        or not all(isinstance(m, list) for m in models)
    ):
        probs.append(
            settings_problem(
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
                    settings_problem(
                        f"{where}.models[{j + 1}]",
                        m,
                        "comparison-setting",
                        "a model names a predictor twice",
                    )
                )
            elif key in seen:
                probs.append(
                    settings_problem(
                        f"{where}.models[{j + 1}]",
                        m,
                        "comparison-setting",
                        f"model {j + 1} repeats model {seen[key] + 1}",
                    )
                )
            seen.setdefault(key, j)
    return probs


def _comparison_problems(
    i: int, c: Mapping[str, Any], quantities: set[str], columns: set[str] | None
) -> list[Problem]:
    from comparo.fitting.multiple import MULTIPLE_METHODS

    where = f"comparison[{i + 1}]"
    probs = _unknown_keys(where, c, COMPARISON_KEYS, "comparison-setting", "a [[comparison]]")

    def quantity(col: str, v: Any, what: str) -> None:
        if not isinstance(v, str) or v not in quantities:
            close = difflib.get_close_matches(str(v), sorted(quantities), n=1)
            probs.append(
                settings_problem(
                    col,
                    v,
                    "comparison-setting",
                    f"{what} must name a quantity (catalogue, derived or ratio key)",
                    f"did you mean {close[0]!r}?" if close else "comparo units lists the keys",
                )
            )

    if c.get("y") is None:
        probs.append(
            settings_problem(
                f"{where}.y",
                None,
                "comparison-setting",
                "a [[comparison]] entry needs y",
                'y = "frequency_observed" (a quantity key)',
            )
        )
    else:
        quantity(f"{where}.y", c["y"], "y")
    probs += _models_problems(where, c.get("models"), quantity)
    method = c.get("method", "ols")
    if method not in MULTIPLE_METHODS:
        probs.append(
            settings_problem(
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
            settings_problem(
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
            settings_problem(
                f"{where}.name", name, "comparison-setting", "name must be a non-empty text"
            )
        )
    return probs


def comparison_problems(
    settings: Mapping[str, Any], catalog, taxa_columns: set[str] | None = None
) -> list[Problem]:
    """Problems of the ``[[comparison]]`` entries (empty when there are none)."""
    return _entries_problems(settings, "comparison", catalog, taxa_columns, _comparison_problems)


def comparisons(
    settings: Mapping[str, Any] | None, catalog=None, taxa_columns: set[str] | None = None
) -> list[dict]:
    """The ``[[comparison]]`` entries to run (dicts with y, models, method, factor, name), in
    order. Raises :class:`InputError` for a bad entry (as ``check`` reports)."""
    settings = settings or {}
    probs = [p for p in table_problems(settings) if p.column == "comparison"]
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
    probs = [p for p in table_problems(settings) if p.column == "analysis"]
    if catalog is not None:
        probs += analysis_problems(settings, catalog, taxa_columns)
    if probs:
        raise InputError(probs)
    declared = settings.get("analysis") or []
    if declared:
        return [dict(a) for a in declared], "declared in comparo.toml"
    chosen = [dict(a) for a in DEFAULT_ANALYSES if a["x"] in table and a["y"] in table]
    return chosen, "default set (comparo.toml declares no [[analysis]])"


def settings_problems(
    settings: Mapping[str, Any], catalog, taxa_columns: set[str] | None = None
) -> list[Problem]:
    """Every problem of the ``[[analysis]]`` and ``[[comparison]]`` entries (empty when there
    are none or they are not lists of tables, which
    :func:`comparo.validation.settings.settings_problems` reports)."""
    return analysis_problems(settings, catalog, taxa_columns) + comparison_problems(
        settings, catalog, taxa_columns
    )
