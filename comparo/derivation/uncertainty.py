"""Propagation of uncertainty: first order (GUM, JCGM 100:2008) on the log scale and Monte
Carlo (JCGM 101:2008) with lognormal inputs, all taxa at once.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any

import numpy as np

from comparo.base.progress import ProgressBar


def gum_relative(exponents: Mapping[str, float], relative_u: Mapping[str, Any]):
    """First-order relative standard uncertainty of y = c·Π xᵢ^pᵢ, inputs uncorrelated.

    (u_y/y)² = Σ (pᵢ·u(xᵢ)/xᵢ)²  (JCGM 100:2008, 5.1.6).

    Parameters
    ----------
    exponents : mapping name -> pᵢ
    relative_u : mapping name -> u(xᵢ)/xᵢ (arrays broadcast)
    """
    total = 0.0
    for name, p in exponents.items():
        total = total + (p * np.asarray(relative_u[name], dtype=float)) ** 2
    return np.sqrt(total)


def sample_inputs(
    values: Mapping[str, Any],
    uncertainties: Mapping[str, Any],
    draws: int,
    rng: np.random.Generator,
    distribution: str = "lognormal",
    dtype: type = np.float64,
) -> dict[str, np.ndarray]:
    """Monte Carlo draws of independent inputs (JCGM 101:2008), in the order of *values*.

    Parameters
    ----------
    values, uncertainties : mappings name -> array of n best estimates and standard
        uncertainties (same unit). An uncertainty of 0 or NaN gives the value itself.
    draws : int
        Draws per value.
    rng : numpy.random.Generator
    distribution : ``lognormal`` (positive quantities: mean = value, sd =
        uncertainty, σ² = ln(1 + (u/x)²), μ = ln x − σ²/2) or ``normal``.
    dtype : numpy float type of the draws (float32 halves time and memory).

    Returns
    -------
    dict name -> array of shape (n, draws); one ``rng.standard_normal((n, draws))``
    call per input, in order.
    """
    out: dict[str, np.ndarray] = {}
    for name, x in values.items():
        x = np.atleast_1d(np.asarray(x, dtype=float))
        u = np.broadcast_to(np.atleast_1d(np.asarray(uncertainties[name], dtype=float)), x.shape)
        u = np.where(np.isfinite(u) & (u > 0), u, 0.0)
        z = rng.standard_normal((x.size, draws), dtype=dtype)
        if distribution == "normal":
            out[name] = (x[:, None] + u[:, None] * z).astype(dtype, copy=False)
        elif distribution == "lognormal":
            with np.errstate(divide="ignore", invalid="ignore"):
                s2 = np.log1p((u / x) ** 2)
            s2 = np.where(np.isfinite(s2), s2, 0.0)
            sig = np.sqrt(s2).astype(dtype)[:, None]
            z *= sig
            z -= (0.5 * s2).astype(dtype)[:, None]
            np.exp(z, out=z)
            z *= x.astype(dtype)[:, None]
            out[name] = z
        else:
            raise ValueError(f"unknown distribution {distribution!r}")
    return out


def coverage_ranks(m, p: float):
    """1-based ranks (r, r + q) of the probabilistically symmetric 100p% coverage
    interval from m sorted draws: q = ⌊pm + 1/2⌋, r = ⌈(m − q)/2⌉ (JCGM 101:2008, 7.7)."""
    m = np.asarray(m)
    q = np.floor(p * m + 0.5).astype(np.int64)
    r = (m - q + 1) // 2
    return np.maximum(r, 1), np.minimum(r + q, m)


MC_SUFFIXES = ("_mc_lo95", "_mc_lo68", "_mc_median", "_mc_hi68", "_mc_hi95")


_STEP = 1.0e-5  # log-scale step of the numerical sensitivities


@dataclass(frozen=True)
class Propagation:
    values: dict[str, np.ndarray]
    u: dict[str, np.ndarray]
    deps: dict[str, dict[str, np.ndarray]]  # output -> leaf -> bool per row
    unknown_u: dict[str, list[list[str]]]  # output -> per row, leaves lacking u
    mc: dict[str, dict[str, np.ndarray]]  # output -> suffix -> array


def propagate(
    compute: Callable[[dict[str, Any]], dict[str, Any]],
    leaves: dict[str, np.ndarray],
    rel_u: dict[str, np.ndarray],
    ignore_unknown: bool,
    mc: int,
    rng: np.random.Generator | None,
    mc_outputs: list[str] | None = None,
    mirrors: dict[str, tuple[str, Callable[[Any], Any]]] | None = None,
    progress: bool = False,
) -> Propagation:
    """Values, GUM uncertainties, lineage and Monte Carlo summaries of compute(leaves).

    First order on the log scale: cᵢ = ∂ln y/∂ln xᵢ by central differences of step
    h (exact for products of powers up to rounding), (u_y/y)² = Σ cᵢ²(u_i/x_i)²
    (JCGM 100:2008, correlations ignored). A leaf is in a row's lineage when
    the output changes with it or vanishes without it.
    """
    base = compute(leaves)
    n = len(next(iter(leaves.values())))
    var = {k: np.zeros(n) for k in base}
    deps: dict[str, dict[str, np.ndarray]] = {k: {} for k in base}
    unknown = {k: np.zeros(n, dtype=bool) for k in base}
    unknown_names: dict[str, list[list[str]]] = {k: [[] for _ in range(n)] for k in base}
    with np.errstate(all="ignore"):
        for name, x in leaves.items():
            up = compute({**leaves, name: x * math.exp(_STEP)})
            dn = compute({**leaves, name: x * math.exp(-_STEP)})
            gone = compute({**leaves, name: np.full_like(x, np.nan)})
            r = rel_u[name]
            for key, y in base.items():
                c = np.log(up[key] / dn[key]) / (2.0 * _STEP)
                c = np.where(np.isfinite(c), c, 0.0)
                used = (c != 0.0) | (np.isnan(gone[key]) & ~np.isnan(y))
                deps[key][name] = used & ~np.isnan(y)
                lacks = used & ~np.isfinite(r)
                contrib = np.where(c != 0.0, (c * np.where(np.isfinite(r), r, 0.0)) ** 2, 0.0)
                var[key] = var[key] + contrib
                if lacks.any():
                    unknown[key] |= lacks
                    for i in np.flatnonzero(lacks & ~np.isnan(y)):
                        unknown_names[key][i].append(name)
    u = {}
    for key, y in base.items():
        uu = np.abs(y) * np.sqrt(var[key])
        if not ignore_unknown:
            uu = np.where(unknown[key], np.nan, uu)
        u[key] = np.where(np.isnan(y), np.nan, uu)
    summaries: dict[str, dict[str, np.ndarray]] = {}
    if mc > 0:
        summaries = _monte_carlo(
            compute, leaves, rel_u, mc, rng, mc_outputs or list(base), mirrors, progress
        )
        for key, s in summaries.items():
            bad = np.isnan(u[key])
            for arr in s.values():
                arr[bad] = np.nan
    return Propagation(base, u, deps, unknown_names, summaries)


def _monte_carlo(compute, leaves, rel_u, mc, rng, outputs, mirrors=None, progress: bool = False):
    """Vectorised Monte Carlo over taxa in blocks of about 1e6 float32 draws (JCGM 101:2008).

    Intervals are order statistics of the sorted draws (JCGM 101:2008, 7.7):
    68% and 95% probabilistically symmetric, the median at the middle rank(s).
    *mirrors* maps an output to (source output, decreasing function): its order
    statistics are read off the sorted source draws at the mirrored ranks, which is
    exact and saves a sort.

    The draws are made in one thread, block after block, in a fixed order (so a seed
    gives the same numbers whatever the timing); each drawn block is evaluated and
    its outputs sorted on a worker thread while the next block is drawn (numpy
    releases the GIL in both), with at most two blocks in flight to bound memory.
    """
    mirrors = mirrors or {}
    n = len(next(iter(leaves.values())))
    block = max(1, 1_000_000 // mc)
    drawn = [k for k, r in rel_u.items() if np.any(np.isfinite(r) & (r > 0))]
    res = {k: {s: np.full(n, np.nan) for s in (*MC_SUFFIXES, "_mc_u")} for k in outputs}
    in_flight: list[Any] = []
    blocks = -(-n // block)
    bar = ProgressBar(progress and n * mc >= 2_000_000, f"Monte Carlo, {mc} draws", blocks, 2)
    with bar, ThreadPoolExecutor(max_workers=min(2, os.cpu_count() or 1)) as pool:
        for start in range(0, n, block):
            stop = min(n, start + block)
            vals = {k: v[start:stop] for k, v in leaves.items()}
            samples = sample_inputs(
                {k: vals[k] for k in drawn},
                {k: vals[k] * rel_u[k][start:stop] for k in drawn},
                mc,
                rng,
                dtype=np.float32,
            )
            args = {
                k: (samples[k] if k in samples else v.astype(np.float32)[:, None])
                for k, v in vals.items()
            }
            del samples
            in_flight.append(
                pool.submit(_mc_block, compute, args, slice(start, stop), mc, outputs, mirrors, res)
            )
            del args
            if len(in_flight) > 1:  # at most two blocks drawn and not yet summarised
                in_flight.pop(0).result()
                bar.advance()
        for f in in_flight:
            f.result()
            bar.advance()
    return res


def _mc_block(compute, args, sl, mc, outputs, mirrors, res) -> None:
    """Evaluate one block of draws and write every output's summaries (a worker thread)."""
    rows = sl.stop - sl.start
    with np.errstate(all="ignore"):
        out = compute(args)
    for key in outputs:
        if key not in mirrors:
            _summarise(key, np.broadcast_to(out[key], (rows, mc)), mc, mirrors, res, sl)
    for key in mirrors:
        if key in res:
            res[key]["_mc_u"][sl] = _sd(np.broadcast_to(out[key], (rows, mc)))


def _sd(y: np.ndarray) -> np.ndarray:
    """Row-wise sample standard deviation of the finite draws (NaN with fewer than 2)."""
    with np.errstate(all="ignore"):
        finite = np.isfinite(y)
        if finite.all():
            return y.std(axis=1, ddof=1, dtype=np.float64)
        m = finite.sum(axis=1)
        z = np.where(finite, y, 0.0).astype(np.float64)
        mean = z.sum(axis=1) / np.maximum(m, 1)
        ss = (np.where(finite, z - mean[:, None], 0.0) ** 2).sum(axis=1)
        return np.where(m > 1, np.sqrt(ss / np.maximum(m - 1, 1)), np.nan)


def _summarise(key, y, mc, mirrors, res, sl) -> None:
    """Sort one output's draws; write its order statistics, sd, and those of its mirrors."""
    with np.errstate(all="ignore"):
        res[key]["_mc_u"][sl] = _sd(y)
        finite = np.isfinite(y)
        m = finite.sum(axis=1)
        ys = np.where(finite, y, np.inf)
        ys.sort(axis=1)  # non-finite draws last
        _order_stats(ys, m, res[key], sl)
        for mkey, (src, fn) in mirrors.items():
            if src == key and mkey in res:
                # fn decreasing: fn of the reversed sorted draws ascends; the source's
                # non-finite draws (sorted last) come first there, so shift them out
                mirrored = fn(ys[:, ::-1])
                idx = np.minimum(np.arange(mc)[None, :] + (mc - m)[:, None], mc - 1)
                _order_stats(np.take_along_axis(mirrored, idx, axis=1), m, res[mkey], sl)


def _order_stats(ys: np.ndarray, m: np.ndarray, target: dict[str, np.ndarray], sl: slice) -> None:
    """Median and 68%/95% intervals from rows sorted ascending whose first m entries are the
    draws."""
    ok = m > 1
    mm = np.maximum(m, 2)
    picks = {}
    for p, lo_s, hi_s in ((0.95, "_mc_lo95", "_mc_hi95"), (0.68, "_mc_lo68", "_mc_hi68")):
        r, t = coverage_ranks(mm, p)
        picks[lo_s], picks[hi_s] = r - 1, t - 1
    rows = np.arange(ys.shape[0])
    for sfx, idx in picks.items():
        target[sfx][sl] = np.where(ok, ys[rows, idx], np.nan)
    a, b = (mm + 1) // 2 - 1, mm // 2  # 0-based middle ranks (equal when m is odd)
    target["_mc_median"][sl] = np.where(ok, 0.5 * (ys[rows, a].astype(float) + ys[rows, b]), np.nan)
