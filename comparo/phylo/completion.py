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

from comparo.base.shared import SharedRecord
from comparo.validation.imputing import DEFAULT_M, impute_settings

__all__ = ["DEFAULT_M", "impute_settings", "predictive_draws", "add_imputed", "imputed_table"]

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


def closest_observed(ft: Any, observed: np.ndarray, k: int = 3) -> dict[int, tuple[list[int], int]]:
    """For every tip without a value: up to *k* observed tips below its nearest ancestor
    that has any (its closest observed relatives, sharing the most recent common ancestor;
    under BM they carry the largest weights of the predictor), nearest by path length
    first, and how many observed tips share that ancestor. Keys and values are tip indices."""
    n, N = ft.n_tips, ft.n_nodes
    count = np.zeros(N, dtype=np.int64)
    count[:n] = observed.astype(np.int64)
    reps: list[list[int]] = [[i] if i < n and observed[i] else [] for i in range(N)]
    bounds = ft.bounds
    par = ft.parent
    for lev in range(len(bounds) - 2):
        a, b = int(bounds[lev]), int(bounds[lev + 1])
        starts, parents = ft.segments[lev]
        count[parents] += np.add.reduceat(count[a:b], starts)
        for i in range(a, b):
            if reps[i] and len(reps[int(par[i])]) < 4 * k:
                reps[int(par[i])].extend(reps[i][: 4 * k])
    out = {}
    dist = ft.root_dist
    for tip in np.flatnonzero(~observed).tolist():
        node = int(par[tip])
        while node >= 0 and count[node] == 0:
            node = int(par[node])
        if node < 0:
            continue
        near = sorted(reps[node], key=lambda j: dist[j])[:k]
        out[tip] = (near, int(count[node]))
    return out


def _lineage(imp: Any, names_by_tip: dict[int, str], near: tuple[list[int], int] | None) -> str:
    how = "ML" if imp.lambda_estimated else "given"
    text = (
        f"imputed: phylogenetic BLUP under Brownian motion (Pagel's lambda {imp.lambda_:.3g} "
        f"{how}, root by GLS, rate by REML"
    )
    if imp.with_:
        text += f"; with {', '.join(imp.with_)}"
    text += ")"
    if near:
        tips, total = near
        shown = ", ".join(names_by_tip[j] for j in tips)
        more = f" and {total - len(tips)} more" if total > len(tips) else ""
        text += f"; closest observed relatives: {shown}{more}"
    return text


def add_imputed(table: Any, ds: Any, settings: Mapping[str, Any]) -> Any:
    """The per-taxon *table* with the imputed values of ``settings["quantities"]`` added
    (the ``[impute]`` settings, :func:`impute_settings`): for each quantity Q, every taxon
    on the tree without a value of Q gets Q = the back-transformed prediction (canonical
    unit; rows added for tips with no row), ``Q_u`` = its prediction SE carried to the
    canonical unit to first order (value·ln 10·SE of log10), ``Q_n`` = ``Q_nsrc`` = 0,
    ``Q_basis`` = ``imputed``, ``Q_obs`` empty, and the new column ``Q_lineage`` (the method
    and the closest observed relatives; empty for observed values). The input is not
    modified. ``attrs["imputed"]`` holds per quantity the counts and the cross-validation.
    """
    import pandas as pd

    from comparo.phylo.imputation import impute
    from comparo.validation.rows import IMPUTED_BASIS

    out = table.copy()
    summary = {}
    for q in settings["quantities"]:
        imp = impute(
            ds,
            q,
            lambda_=settings.get("lambda", "ml"),
            with_=[w for w in settings.get("with", []) if w != q],
        )
        e = imp.engine
        names_by_tip = {int(t): imp.taxa[j] for j, t in enumerate(e["order"])}
        near = closest_observed(e["flat"], e["observed"])
        tip_of_row = {j: int(t) for j, t in enumerate(e["order"])}
        rows = [j for j in range(len(imp.taxa)) if not imp.observed[j]]
        names = [imp.taxa[j] for j in rows]
        have = set(out["taxon"].astype(str))
        new = [t for t in names if t not in have]
        if new:
            out = pd.concat([out, pd.DataFrame({"taxon": new})], ignore_index=True)
        pos = {t: i for i, t in enumerate(out["taxon"].astype(str))}
        at = out.index[[pos[t] for t in names]]
        value = imp.value[rows]
        for col, fill in (
            (q, np.nan),
            (f"{q}_u", np.nan),
            (f"{q}_n", 0),
            (f"{q}_nsrc", 0),
            (f"{q}_basis", ""),
            (f"{q}_obs", ""),
            (f"{q}_lineage", ""),
        ):
            if col not in out:
                out[col] = fill
            elif isinstance(fill, str):
                out[col] = out[col].fillna("").astype(object)
            else:
                out[col] = out[col].fillna(fill) if col.endswith(("_n", "_nsrc")) else out[col]
        out.loc[at, q] = value
        out.loc[at, f"{q}_u"] = value * np.log(10.0) * imp.log_se[rows]
        out.loc[at, f"{q}_n"] = 0
        out.loc[at, f"{q}_nsrc"] = 0
        out.loc[at, f"{q}_basis"] = IMPUTED_BASIS
        out.loc[at, f"{q}_obs"] = ""
        out.loc[at, f"{q}_lineage"] = [
            _lineage(imp, names_by_tip, near.get(tip_of_row[j])) for j in rows
        ]
        summary[q] = {
            "n_observed": imp.n_observed,
            "n_imputed": imp.n_imputed,
            "lambda": imp.lambda_,
            "with": list(imp.with_),
            "rmse_log": imp.rmse_log,
            "coverage": imp.coverage,
        }
    cols = set(out.columns)
    for c in out.columns:  # the rows added: nothing observed in the other quantities either
        stem = c.rsplit("_", 1)[0]
        if stem in cols and c.endswith(("_n", "_nsrc")):
            out[c] = out[c].fillna(0).astype(int)
        elif stem in cols and c.endswith(("_basis", "_obs", "_lineage")):
            out[c] = out[c].fillna("").astype(object)
    order = [c for c in out.columns if not c.endswith("_lineage")]
    for q in summary:  # the lineage column right after the quantity's obs_ids
        order.insert(order.index(f"{q}_obs") + 1, f"{q}_lineage")
    out = out[order]
    out.attrs["imputed"] = SharedRecord(summary)
    return out


def imputed_table(table: Any, ds: Any, asked: str | None = None) -> Any:
    """The hook of ``table`` and ``derive``: *table* unchanged unless imputation is asked,
    by ``--impute [Q1,Q2]`` (*asked*: "" for the quantities of ``[impute]``) or by an
    ``[impute]`` table in comparo.toml; then :func:`add_imputed`.

    Raises
    ------
    InputError
        A bad ``[impute]`` table.
    UsageError
        ``--impute`` without quantities and no ``[impute]`` table, or an imputation refused.
    """
    from comparo.base.errors import UsageError

    settings = impute_settings(ds.settings, ds.catalog)
    if asked is None and settings is None:
        return table
    chosen = [q.strip() for q in (asked or "").split(",") if q.strip()]
    if not chosen and settings is None:
        raise UsageError(
            "--impute names no quantity and comparo.toml has no [impute] table: "
            "give --impute Q1,Q2 or add [impute] quantities = [...]"
        )
    base = settings or {"with": [], "lambda": "ml", "m": DEFAULT_M}
    return add_imputed(table, ds, {**base, "quantities": chosen or base["quantities"]})


def imputation_audit(ds: Any) -> dict[str, dict[str, Any]]:
    """What ``[impute]`` of comparo.toml would add to the per-taxon table, per quantity:
    ``n_observed``, ``n_imputed``, ``lambda``, ``with``, ``rmse_log`` and ``coverage``
    (leave-one-out), or ``refused`` (the reason) when the imputation cannot run. Empty
    without ``[impute]`` or without a tree."""
    from comparo.base.errors import UsageError
    from comparo.phylo.imputation import impute

    settings = impute_settings(ds.settings, ds.catalog)
    if settings is None or ds.tree is None:
        return {}
    out: dict[str, dict[str, Any]] = {}
    for q in settings["quantities"]:
        try:
            imp = impute(
                ds,
                q,
                lambda_=settings["lambda"],
                with_=[w for w in settings["with"] if w != q],
            )
        except UsageError as exc:
            out[q] = {"refused": str(exc)}
            continue
        out[q] = {
            "n_observed": imp.n_observed,
            "n_imputed": imp.n_imputed,
            "lambda": imp.lambda_,
            "with": list(imp.with_),
            "rmse_log": imp.rmse_log,
            "coverage": imp.coverage,
        }
    return out
