"""One taxon's values of one quantity combined into one value with its uncertainty.

:func:`combine` (one taxon) and :func:`aggregate_quantity` (every taxon of one quantity at
once, bit for bit the same numbers) take harmonised observation rows (``value_h``, ``u_h``
in the canonical unit, ``n``) and return the combined value and standard uncertainty:
the inverse-variance weighted mean inflated by the Birge ratio, the n-weighted mean, or
the median. :func:`taxon_values` gives the values the traces rest on
(:func:`comparo.traces.rows.with_taxon_values`).
"""

from __future__ import annotations

import math
from collections.abc import Iterable

import numpy as np
import pandas as pd

from comparo.validation.rows import BASIS_ORDER


def combine(part: pd.DataFrame, how: str) -> tuple[float, float]:
    """One taxon's values of one quantity (rows with ``value_h``, ``u_h``, ``n``) as one
    value and its standard uncertainty, in their unit: see :func:`aggregate_quantity`."""
    v = part["value_h"].to_numpy(float)
    u = part["u_h"].to_numpy(float)
    n = part["n"].to_numpy(float)
    if len(v) == 1:
        return float(v[0]), float(u[0])
    if how == "median":
        med = float(np.median(v))
        # standard uncertainty of a median ~ 1.2533 x that of the mean (normal errors;
        # from memory)
        return med, float(1.2533 * np.std(v, ddof=1) / math.sqrt(len(v)))
    if np.all(np.isfinite(u) & (u > 0)):
        w = 1.0 / u**2
        mean = float(np.sum(w * v) / np.sum(w))
        u_c = 1.0 / math.sqrt(np.sum(w))
        chi2 = float(np.sum(w * (v - mean) ** 2))
        birge = math.sqrt(
            chi2 / (len(v) - 1)
        )  # Birge ratio: inflate when values scatter more than their uncertainties
        return mean, u_c * max(1.0, birge)
    w = np.where(np.isfinite(n) & (n > 0), n, 1.0)
    mean = float(np.sum(w * v) / np.sum(w))
    return mean, float(np.std(v, ddof=1) / math.sqrt(len(v)))


def _ivw_scaled(V: np.ndarray, U: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Inverse-variance weighted mean and its Birge-inflated standard uncertainty per row,
    with weights (min u / u)^2 <= 1 so that no weight over- or underflows."""
    k = V.shape[1]
    umin = U.min(axis=1, keepdims=True)
    W = (umin / U) ** 2
    sw = W.sum(axis=1)
    mean = np.sum(W * V, axis=1) / sw
    spread = np.sqrt(
        np.sum(W * (V - mean[:, None]) ** 2, axis=1) / (k - 1)
    )  # = Birge ratio x min u
    return mean, np.maximum(umin[:, 0], spread) / np.sqrt(sw)


def aggregate_quantity(part: pd.DataFrame, q: str, how: str, rank: dict[str, int]) -> pd.DataFrame:
    """:func:`combine` for every taxon of one quantity at once.

    Taxa with the same number of values are stacked into one 2-D array and
    reduced along rows, which numpy sums exactly as it sums each row alone, so
    the numbers equal those of a per-taxon loop bit for bit.
    """
    codes, taxa = pd.factorize(part["accepted"].to_numpy(object))  # order of first appearance
    order = np.argsort(codes, kind="stable")  # grouped, table order within a taxon
    c = codes[order]
    v = part["value_h"].to_numpy(float)[order]
    u = part["u_h"].to_numpy(float)[order]
    n = part["n"].to_numpy(float)[order]
    sizes = np.bincount(c, minlength=len(taxa))
    starts = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    val = np.empty(len(taxa))
    unc = np.empty(len(taxa))
    for k in np.unique(sizes):
        gs = np.flatnonzero(sizes == k)
        idx = starts[gs][:, None] + np.arange(k)[None, :]
        V, U, N = v[idx], u[idx], n[idx]
        if k == 1:
            val[gs], unc[gs] = V[:, 0], U[:, 0]
            continue
        if how == "median":
            val[gs] = np.median(V, axis=1)
            # standard uncertainty of a median ~ 1.2533 x that of the mean (normal errors;
            # from memory)
            unc[gs] = 1.2533 * np.std(V, axis=1, ddof=1) / math.sqrt(k)
            continue
        ivw = np.all(np.isfinite(U) & (U > 0), axis=1)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            if ivw.any():
                Vi, W = V[ivw], 1.0 / U[ivw] ** 2
                sw = np.sum(W, axis=1)
                mean = np.sum(W * Vi, axis=1) / sw
                chi2 = np.sum(W * (Vi - mean[:, None]) ** 2, axis=1)
                birge = np.sqrt(
                    chi2 / (k - 1)
                )  # Birge ratio: inflate when values scatter more than their uncertainties
                u_c = (1.0 / np.sqrt(sw)) * np.where(birge > 1.0, birge, 1.0)
                off = ~(np.isfinite(mean) & np.isfinite(u_c))
                if off.any():  # weights 1/u^2 over- or underflowed: the same mean with
                    # weights scaled by min(u)^2
                    mean[off], u_c[off] = _ivw_scaled(Vi[off], U[ivw][off])
                val[gs[ivw]] = mean
                unc[gs[ivw]] = u_c
            if (~ivw).any():
                Vn, Nn = V[~ivw], N[~ivw]
                W = np.where(np.isfinite(Nn) & (Nn > 0), Nn, 1.0)
                val[gs[~ivw]] = np.sum(W * Vn, axis=1) / np.sum(W, axis=1)
                unc[gs[~ivw]] = np.std(Vn, axis=1, ddof=1) / math.sqrt(k)
    bounds = np.concatenate([starts, [len(c)]])
    ids = part["obs_id"].to_numpy(object)[order]
    src = pd.Series(part["source_id"].to_numpy(object)[order])
    nsrc = src.groupby(c, sort=True).nunique().to_numpy(int)
    brank = part["basis_effective"].map(rank).to_numpy(int)[order]
    weakest = np.maximum.reduceat(brank, starts) if len(c) else brank
    return pd.DataFrame(
        {
            q: val,
            f"{q}_u": unc,
            f"{q}_n": sizes.astype(int),
            f"{q}_nsrc": nsrc,
            f"{q}_basis": [BASIS_ORDER[r] for r in weakest],
            f"{q}_obs": [";".join(ids[a:b]) for a, b in zip(bounds[:-1], bounds[1:], strict=True)],
        },
        index=pd.Index(list(taxa)),
    )


def taxon_values(
    rows: pd.DataFrame, keys: Iterable[str]
) -> dict[tuple[str, str], tuple[float, float, tuple[str, ...]]]:
    """``(accepted taxon, key) -> (value, standard uncertainty, obs_ids)`` for the used rows
    of *rows* (harmonised, with ``accepted`` and ``status``) whose quantity is one of
    *keys*, each combined as the per-taxon table combines it (mean; canonical unit)."""
    wanted = set(keys)
    used = rows[(rows["status"] == "used") & rows["quantity_key"].isin(wanted)]
    out: dict[tuple[str, str], tuple[float, float, tuple[str, ...]]] = {}
    for (taxon, key), part in used.groupby(["accepted", "quantity_key"], sort=False):
        v, u = combine(part, "mean")
        out[(str(taxon), str(key))] = (v, u, tuple(part["obs_id"]))
    return out
