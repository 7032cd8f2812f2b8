"""Imputed values put to use, never silently: the ``[impute]`` settings of comparo.toml,
joint draws from the predictive distribution (for multiple imputation), and the per-taxon
table with its imputed values added (basis ``imputed``).

Draws are conditional simulations: an unconditional Brownian-motion path Z on the tree
(with the fitted lambda and rate), predicted from its own values where the data are
observed, gives Z_m − Ẑ_m, an exact draw of the prediction error of the BLUP (the GLS
root's uncertainty included, because the predictor is unbiased for any root value);
added to the imputation it is a joint draw of every imputed taxon given the observed ones
(Journel AG, Huijbregts CJ (1978) Mining geostatistics, Academic Press: conditional
simulation by kriging the simulated errors). The rate's own uncertainty enters by a scaled
inverse chi-square draw, sigma²·(n_o − 1)/χ²_{n_o−1} (Rubin 1987: proper imputations draw
the parameters too); lambda is held.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from comparo.base.errors import InputError, Problem

#: Draws of a multiple imputation unless ``m`` is given.
DEFAULT_M = 20

#: Seed of the draws unless given (fixed, so a rerun gives the same numbers).
DEFAULT_SEED = 20261205


def _simulate(ft: Any, edges: np.ndarray, R: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Brownian motion of p traits with covariance R per unit branch length down the
    edges, root 0: tip rows (n_tips x p)."""
    p = R.shape[0]
    L = np.linalg.cholesky(R)
    X = np.zeros((ft.n_nodes, p))
    bounds = ft.bounds
    for k in range(len(bounds) - 3, -1, -1):
        a, b = int(bounds[k]), int(bounds[k + 1])
        step = rng.standard_normal((b - a, p)) @ L.T
        X[a:b] = X[ft.parent[a:b]] + step * np.sqrt(edges[a:b])[:, None]
    return X[: ft.n_tips]


def _predict_target(ft: Any, edges: np.ndarray, Y: np.ndarray, R: np.ndarray | None) -> np.ndarray:
    """The imputation's predictor of trait 0 at every tip from the values Y (NaN: none)."""
    if Y.shape[1] == 1:
        from comparo.phylo.imputation import predict_tips

        return predict_tips(ft, Y[:, 0], edges).mean
    from comparo.phylo.multitrait import condition_on_own, tip_conditionals

    tc = tip_conditionals(ft, Y, R, edges)
    return condition_on_own(tc.mean, tc.cov, Y, 0)[0]


def predictive_draws(imp: Any, m: int, seed: int = DEFAULT_SEED) -> np.ndarray:
    """*m* joint draws (rows) of the log10 values of the imputed taxa of *imp* (an
    :class:`comparo.phylo.imputation.Imputation`; columns in the order of its imputed taxa)
    from their predictive distribution, by conditional simulation (module docstring)."""
    e = imp.engine
    if e is None:
        raise ValueError("this imputation carries no engine state to draw from")
    ft, edges, Y = e["flat"], e["edges"], e["Y"]
    obs = e["observed"]
    R = np.array([[e["sigma2"]]]) if e.get("R") is None else np.asarray(e["R"])
    n_o = int(obs.sum())
    mask = np.isfinite(Y)
    pred = e["log_value"]  # imputed tips: the BLUP
    order = e["order"]
    imputed_rows = order[~obs[order]]  # tips of the imputed taxa, in the result's order
    rng = np.random.default_rng(seed)
    out = np.empty((m, imputed_rows.size))
    for k in range(m):
        scale = (n_o - 1) / rng.chisquare(n_o - 1)
        Z = _simulate(ft, edges, R * scale, rng)
        Zo = np.where(mask, Z, np.nan)
        err = Z[:, 0] - _predict_target(ft, edges, Zo, R)
        out[k] = pred[imputed_rows] + err[imputed_rows]
    return out


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
        if key not in ("quantities", "with", "lambda", "m"):
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
