"""How far the slope of a scaling fit spreads: its analytic standard error, the
leave-one-taxon-out jackknife and the Monte Carlo propagation of measurement error (the parts
of :func:`comparo.fitting.source_sensitivity.sensitivity` that refit on changed values, not on
changed sources).

References
----------
Quenouille, M. H. (1956) Notes on bias in estimation. Biometrika 43, 353-360.
Efron, B. (1982) The Jackknife, the Bootstrap and Other Resampling Plans. SIAM.
JCGM 101:2008 Evaluation of measurement data - Supplement 1 to the GUM:
propagation of distributions using a Monte Carlo method.
"""

from __future__ import annotations

import math

import numpy as np

from comparo.base.errors import UsageError
from comparo.base.progress import ProgressBar
from comparo.base.scales import to_scale
from comparo.fitting.core import slope_from_moments
from comparo.fitting.resampling import jackknife_moments
from comparo.fitting.result import FitResult
from comparo.fitting.robust import huber_slopes
from comparo.fitting.scaling import fit

#: methods whose slope follows from the sample moments (all draws at once)
MOMENT_METHODS = ("ols", "sma", "ma")


def analytic_se(result: FitResult) -> float:
    """Analytic standard error of the slope of a fit.

    OLS: s_e / (s_X sqrt(n - 1)), i.e. |b| sqrt((1 - r^2) / ((n - 2) r^2));
    SMA: |b| sqrt((1 - r^2)/(n - 2)) (Warton et al. 2006, Biol. Rev. 81, 259-291);
    other methods: CI width / (2 t(n - 2)), the normal-theory reading of the interval.
    """
    from scipy import stats

    n, b, r2 = result.n, result.slope, result.r2
    if result.method == "ols" and 0 < r2 <= 1 and n > 2:
        return abs(b) * math.sqrt((1 - r2) / ((n - 2) * r2)) if r2 < 1 else 0.0
    if result.method == "sma" and 0 <= r2 <= 1 and n > 2:
        return abs(b) * math.sqrt((1 - r2) / (n - 2))
    lo, hi = result.slope_ci
    if not (math.isfinite(lo) and math.isfinite(hi)) or n < 3:
        return float("nan")
    return (hi - lo) / (2 * stats.t.ppf(0.5 + result.ci_level / 2, n - 2))


def jackknife_se(values: np.ndarray) -> float:
    """Jackknife standard error from leave-one-out estimates theta_(i).

    SE = sqrt((n - 1)/n * sum_i (theta_(i) - theta_bar)^2)  (Quenouille 1956; Efron 1982, ch. 2).
    """
    v = np.asarray(values, dtype=float)
    n = len(v)
    return float(math.sqrt((n - 1) / n * np.sum((v - v.mean()) ** 2)))


def lognormal_draws(
    value: np.ndarray, u: np.ndarray, draws: int, rng: np.random.Generator
) -> np.ndarray:
    """Draws (draws x n) with mean ``value`` and standard deviation ``u``.

    Positive values: log-normal with sigma^2 = ln(1 + (u/v)^2), mu = ln v - sigma^2/2, the
    log-normal of given mean and standard deviation (moment matching); zero or
    non-positive values: normal. u = 0 returns v exactly.
    """
    v = np.asarray(value, dtype=float)
    s = np.nan_to_num(np.asarray(u, dtype=float), nan=0.0)
    z = rng.standard_normal((draws, len(v)))
    pos = v > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        sig2 = np.where(pos, np.log1p((s / np.where(pos, v, 1.0)) ** 2), 0.0)
        logn = np.where(pos, v, 1.0) * np.exp(np.sqrt(sig2) * z - sig2 / 2)
    return np.where(pos, np.where(s > 0, logn, v), v + s * z)


#: Monte Carlo draws are capped for methods refitted one draw at a time (seconds per 100
#: draws at n = 60 here).
MC_CAP = {"lts": 200, "pgls": 200}
#: LTS starts per Monte Carlo draw (random two-point starts; the full fit uses all pairs up
#: to 3000).
MC_LTS_STARTS = 300


def _draw_slopes(
    method: str,
    X: np.ndarray,
    Y: np.ndarray,
    labels: list[str],
    result: FitResult,
    fit_options: dict,
    seed: int,
) -> np.ndarray:
    """Slopes of the fit *method* on each row of X, Y (fitted scale)."""
    if method in MOMENT_METHODS:
        n = X.shape[1]
        xc, yc = X - X.mean(axis=1, keepdims=True), Y - Y.mean(axis=1, keepdims=True)
        sxx, syy, sxy = (
            (xc * xc).sum(1) / (n - 1),
            (yc * yc).sum(1) / (n - 1),
            (xc * yc).sum(1) / (n - 1),
        )
        return slope_from_moments(method, sxx, syy, sxy)
    out = np.full(X.shape[0], np.nan)
    ok = np.isfinite(X).all(1) & np.isfinite(Y).all(1)
    if method == "robust":
        if ok.any():
            out[ok] = huber_slopes(X[ok], Y[ok])
        return out
    if method == "lts":
        from comparo.fitting.least_squares import ols_line
        from comparo.fitting.robust import LTS_CUT, lts_fit

        for k in np.flatnonzero(ok):
            raw = lts_fit(X[k], Y[k], max_starts=MC_LTS_STARTS, seed=seed + k)
            std = (
                (Y[k] - raw.intercept - raw.slope * X[k]) / raw.scale
                if raw.scale > 0
                else np.zeros(X.shape[1])
            )
            kept = np.abs(std) <= LTS_CUT
            if kept.sum() < 3 or np.ptp(X[k][kept]) == 0:
                kept = raw.subset
            out[k] = ols_line(X[k][kept], Y[k][kept]).slope
        return out
    if method == "pgls":
        import pandas as pd

        from comparo.phylo import pgls, read_tree

        opts = {k: v for k, v in fit_options.items() if k in ("tree", "tree_labels", "reml")}
        if isinstance(opts.get("tree"), str):
            opts["tree"] = read_tree(opts["tree"])
        lam = result.lambda_ if result.lambda_ is not None else "ml"
        for k in np.flatnonzero(ok):
            t = pd.DataFrame({"taxon": labels, "x": X[k], "y": Y[k]})
            out[k] = pgls(table=t, x="x", y="y", log="none", lambda_=lam, **opts)["slope"]
        return out
    raise UsageError(f"measurement-error Monte Carlo: unknown method {method!r}")


def measurement_error_mc(
    table,
    result: FitResult,
    *,
    log: str,
    mc: int,
    seed: int,
    taxon_col: str = "taxon",
    progress: bool = False,
    fit_options: dict | None = None,
) -> dict:
    """Monte Carlo propagation of the per-taxon uncertainties ``Q_u`` into the slope.

    Each draw replaces every used x and y value by a draw of mean value, sd ``Q_u``
    (:func:`lognormal_draws`), refits on the same taxa and keeps the slope.
    ``spread`` is the sd of those slopes, ``sampling_se`` the fit's analytic SE,
    ``total_se`` = sqrt(spread^2 + sampling_se^2) (the two treated as
    independent; the propagation of distributions of JCGM 101:2008).

    Every fit method is supported: ols, sma and ma from moments and robust by a
    vectorised IRLS, all draws at once; lts and pgls one draw at a time, capped at
    ``MC_CAP`` draws (``draws`` reports the number made, ``draws_asked`` the
    number asked, ``note`` says so). LTS draws use ``MC_LTS_STARTS`` random
    starts; PGLS draws hold Pagel's lambda at the full-data estimate (the spread
    is that of the slope given lambda).
    """
    x, y, method = result.x, result.y, result.method
    fit_options = dict(fit_options or {})
    out = {
        "draws": int(mc),
        "seed": int(seed),
        "slope_mean": None,
        "spread": None,
        "sampling_se": analytic_se(result),
        "total_se": None,
        "share": None,
        "fixed_x": 0,
        "fixed_y": 0,
        "note": None,
    }
    notes = []
    if method in MC_CAP and mc > MC_CAP[method]:
        notes.append(
            f"{method} is refitted one draw at a time: {MC_CAP[method]} of the {mc} draws asked "
            f"were made"
        )
        out["draws_asked"] = int(mc)
        mc = MC_CAP[method]
        out["draws"] = int(mc)
    if method == "lts":
        notes.append(f"each LTS draw starts from {MC_LTS_STARTS} random point pairs")
    if method == "pgls":
        notes.append("PGLS draws hold Pagel's lambda at the full-data estimate")
    if mc < 2:
        out["note"] = "fewer than 2 draws asked"
        return out
    labels = [p["label"] for p in result.points]
    if method == "pgls":
        labels = pgls_labels(table, result, taxon_col)
        if len(labels) != result.n:
            out["note"] = "; ".join(
                notes
                + ["the PGLS taxa could not be matched to the table; Monte Carlo not computed"]
            )
            return out
    t = table.set_index(table[taxon_col].astype(str)) if taxon_col in table.columns else table
    idx = t.index.get_indexer(labels) if taxon_col in table.columns else np.arange(len(labels))
    if not labels or (idx < 0).any() or t.index.has_duplicates:
        out["note"] = "; ".join(
            notes + ["taxon labels do not match the table one to one; Monte Carlo not computed"]
        )
        return out
    rows = t.iloc[idx]
    out["points"] = len(labels)
    vals, us = {}, {}
    for q in (x, y):
        vals[q] = np.asarray(rows[q], dtype=float)
        us[q] = (
            np.asarray(rows[f"{q}_u"], dtype=float)
            if f"{q}_u" in rows.columns
            else np.full(len(rows), np.nan)
        )
        out[f"fixed_{'x' if q == x else 'y'}"] = int(np.sum(~(np.nan_to_num(us[q], nan=0.0) > 0)))
    rng = np.random.default_rng(seed)
    slopes = np.empty(mc)
    chunk = max(1, min(mc, 2_000_000 // max(1, len(labels))))
    with ProgressBar(progress, "measurement error", mc) as bar:
        for start in range(0, mc, chunk):
            k = min(chunk, mc - start)
            X = to_scale(lognormal_draws(vals[x], us[x], k, rng), log)
            Y = to_scale(lognormal_draws(vals[y], us[y], k, rng), log)
            slopes[start : start + k] = _draw_slopes(
                method, X, Y, labels, result, fit_options, seed
            )
            bar.advance(k)
    ok = np.isfinite(slopes)
    if ok.sum() < 2:
        out["note"] = "; ".join(notes + ["no finite slopes among the draws"])
        return out
    good = slopes[ok]
    spread = float(
        np.std(good - good[0], ddof=1)
    )  # centred on one draw: identical draws give exactly 0
    se = out["sampling_se"]
    total = math.sqrt(spread**2 + se**2) if math.isfinite(se) else float("nan")
    out.update(
        slope_mean=float(np.mean(slopes[ok])),
        spread=spread,
        total_se=total,
        share=(spread**2 / total**2) if total > 0 else 0.0,
    )
    if ok.sum() < mc:
        notes.append(
            f"{mc - int(ok.sum())} draw(s) gave no finite slope (non-positive draws on log axes) "
            f"and were left out"
        )
    out["note"] = "; ".join(notes) or None
    return out


def pgls_labels(table, result: FitResult, taxon_col: str) -> list[str]:
    """The taxa a PGLS fit used (a PGLS result keeps no per-point table)."""
    if taxon_col not in table.columns:
        return []
    gone = {e["label"] for e in result.excluded} | set(
        (result.phylo or {}).get("taxa_without_tips") or []
    )
    return [lab for lab in table[taxon_col].astype(str) if lab not in gone]


def taxon_jackknife(result: FitResult, fit_kwargs: dict, table=None) -> dict:
    """Leave-one-taxon-out slopes and their jackknife SE beside the analytic SE.

    PGLS (needs *table*): each taxon is left out of the table and the PGLS line
    refitted on the pruned tree with Pagel's lambda held at the full-data estimate.
    """
    if result.method == "pgls" and table is not None:
        taxon_col = fit_kwargs.get("taxon_col", "taxon")
        labels = pgls_labels(table, result, taxon_col)
        if len(labels) == result.n and result.n >= 4:
            kw = dict(fit_kwargs)
            kw["lambda_"] = (
                result.lambda_ if result.lambda_ is not None else kw.get("lambda_", "ml")
            )
            if isinstance(kw.get("tree"), str):
                from comparo.phylo import read_tree

                kw["tree"] = read_tree(kw["tree"])
            names = table[taxon_col].astype(str)
            b = np.array(
                [fit(table[names != lab], result.x, result.y, "pgls", **kw).slope for lab in labels]
            )
            held = "PGLS leave-one-out refits hold Pagel's lambda at the full-data estimate"
            return _jackknife_record(result, b, held)
    pts = result.points_frame()
    if pts.empty:
        return {
            "slope_jackknife": None,
            "slope_analytic": analytic_se(result),
            "ratio": None,
            "n": int(result.n),
            "note": f"leave-one-taxon-out jackknife is not computed for {result.method}",
        }
    X, Y = pts["x_fit"].to_numpy(float), pts["y_fit"].to_numpy(float)
    n = len(X)
    if result.method in MOMENT_METHODS:
        b, _ = jackknife_moments(result.method, X, Y)
    else:
        import pandas as pd

        b = np.empty(n)
        kw = {k: v for k, v in fit_kwargs.items() if k not in ("log", "taxon_col", "against")}
        for i in range(n):
            keep = np.arange(n) != i
            t = pd.DataFrame({"taxon": pts["label"][keep], "x": X[keep], "y": Y[keep]})
            b[i] = fit(t, "x", "y", log="none", **kw).slope
    return _jackknife_record(result, b)


def _jackknife_record(result: FitResult, loo: np.ndarray, note: str | None = None) -> dict:
    """The jackknife SE of the leave-one-out slopes *loo* beside the analytic SE of *result*."""
    se_a = analytic_se(result)
    se_j = jackknife_se(loo)
    out = {
        "slope_jackknife": se_j,
        "slope_analytic": se_a,
        "ratio": se_j / se_a if se_a > 0 else None,
        "n": int(len(loo)),
    }
    if note:
        out["note"] = note
    return out
