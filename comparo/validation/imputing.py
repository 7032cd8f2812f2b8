"""The ``[impute]`` table of comparo.toml, checked once and up front (``comparo check``
reports its problems; ``table``, ``derive``, ``fit`` and ``audit`` use it through
:mod:`comparo.phylo.completion`). docs/methods/imputation.md describes the keys.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from comparo.base.errors import InputError, Problem

#: Draws of a multiple imputation unless ``m`` is given.
DEFAULT_M = 20

#: Keys ``[impute]`` may hold.
IMPUTE_KEYS = ("quantities", "with", "lambda", "m")


def _problem(column: str, value: Any, message: str, hint: str = "") -> Problem:
    shown = None if value is None else str(value)
    return Problem("error", "comparo.toml", None, column, shown, "impute-settings", message, hint)


def impute_settings(settings: Mapping[str, Any] | None, catalog: Any = None) -> dict | None:
    """The ``[impute]`` table of comparo.toml, checked: ``quantities`` (list of catalogue
    keys to impute), ``with`` (list of correlated quantities, optional), ``lambda`` ("ml"
    or a number in [0, 1], default "ml"), ``m`` (draws for fits, default
    :data:`DEFAULT_M`). None when the table is absent (nothing is imputed).

    Raises
    ------
    InputError
        Every problem at once: not a table, unknown key, quantities missing or unknown,
        lambda or m out of range.
    """
    settings = settings or {}
    if "impute" not in settings:
        return None
    t = settings["impute"]
    if not isinstance(t, Mapping):
        raise InputError(
            [_problem("impute", t, "impute must be a table ([impute] section)", "[impute]")]
        )
    probs = []
    for key in t:
        if key not in IMPUTE_KEYS:
            probs.append(
                _problem(
                    f"impute.{key}",
                    t[key],
                    f"unknown key {key!r} in [impute]",
                    "keys: quantities, with, lambda, m",
                )
            )
    lists = {}
    for key in ("quantities", "with"):
        v = t.get(key, [])
        if isinstance(v, str):
            v = [v]
        if not isinstance(v, list) or not all(isinstance(q, str) for q in v):
            probs.append(_problem(f"impute.{key}", v, f"{key} must be a list of quantity keys"))
            v = []
        if catalog is not None:
            for q in v:
                if q not in catalog:
                    probs.append(_problem(f"impute.{key}", q, f"unknown quantity {q!r}"))
        lists[key] = list(dict.fromkeys(v))
    if not lists["quantities"]:
        probs.append(
            _problem(
                "impute.quantities",
                t.get("quantities"),
                "[impute] names no quantity",
                'quantities = ["fiber_radius"]',
            )
        )
    lam = t.get("lambda", "ml")
    ok = (isinstance(lam, str) and lam.lower() == "ml") or (
        isinstance(lam, int | float) and not isinstance(lam, bool) and 0 <= lam <= 1
    )
    if not ok:
        probs.append(_problem("impute.lambda", lam, "lambda must be 'ml' or a number in [0, 1]"))
    m = t.get("m", DEFAULT_M)
    if not isinstance(m, int) or isinstance(m, bool) or m < 2:
        probs.append(_problem("impute.m", m, "m must be a whole number >= 2"))
    if probs:
        raise InputError(probs)
    return {"quantities": lists["quantities"], "with": lists["with"], "lambda": lam, "m": m}


def impute_problems(settings: Mapping[str, Any] | None, catalog: Any = None) -> list[Problem]:
    """Every problem of ``[impute]`` (none when it is absent or right): the gate hook."""
    try:
        impute_settings(settings, catalog)
    except InputError as exc:
        return [Problem(**row) for row in exc.problems.to_dict("records")]
    return []
