"""Resampling of a multiple regression (:func:`comparo.fitting.multiple_fit`): the case bootstrap
of each term, the leave-one-taxon-out jackknife and the Monte Carlo propagation of the per-taxon
measurement uncertainties.

Efron B, Tibshirani RJ (1993) An Introduction to the Bootstrap. Chapman & Hall (case
resampling, percentile intervals, the jackknife standard error).
JCGM 101:2008, Evaluation of measurement data: propagation of distributions using a Monte
Carlo method (the measurement-error draws).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import replace
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.errors import UsageError
from comparo.base.jsonsafe import finite_or_none as _f
from comparo.base.numbers import number
from comparo.fitting.multiple import Design, MultipleFit, fit_design

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

#: Why the case bootstrap is not offered for PGLS, said where it is refused.
PGLS_BOOTSTRAP = (
    "--bootstrap resamples taxa with replacement, which breaks the phylogenetic covariance of "
    "PGLS (a taxon drawn twice becomes two tips at distance zero, and the tree no longer "
    "describes the rows); with --method pgls use the GLS intervals, --sensitivity (leave one "
    "source out, leave one taxon out, measurement-error draws), or --method ols --bootstrap "
    "for a non-phylogenetic check"
)
#: Draws refitted one at a time by an iterative fit are capped at this number.
ROBUST_MC_CAP = 200


def _coefficients(method: str, X: np.ndarray, y: np.ndarray) -> np.ndarray:
    """OLS (least squares) or Huber (statsmodels RLM, as :func:`multiple_fit`) coefficients."""
    if method == "robust":
        import statsmodels.api as sm

        from comparo.fitting.robust import HUBER_C

        return np.asarray(
            sm.RLM(y, X, M=sm.robust.norms.HuberT(t=HUBER_C)).fit().params, dtype=float
        )
    return np.linalg.lstsq(X, y, rcond=None)[0]


def bootstrap_terms(
    d: Design,
    fit: MultipleFit,
    resamples: int,
    seed: int,
) -> dict:
    """Case bootstrap of every term: taxa drawn with replacement, the model refitted, and the
    percentile interval at the fit's confidence level (Efron & Tibshirani 1993). OLS and
    robust only (:data:`PGLS_BOOTSTRAP` says why not PGLS). A resample whose design is
    singular (a factor level or a predictor's spread lost) is left out and counted.

    Returns ``{"method": "case bootstrap (percentile)", "resamples", "seed", "failed",
    "terms": [{"term", "estimate", "bootstrap_se", "ci": [lo, hi]}]}``."""
    if fit.method == "pgls":
        raise UsageError(PGLS_BOOTSTRAP)
    if resamples < 2:
        raise UsageError(f"--bootstrap needs at least 2 resamples (got {resamples})")
    X, names = d.matrix(fit.predictors)
    n, p = X.shape
    rng = np.random.default_rng(seed)
    out = np.full((resamples, p), np.nan)
    for b in range(resamples):
        idx = rng.integers(0, n, size=n)
        Xb = X[idx]
        if np.linalg.matrix_rank(Xb) == p:
            out[b] = _coefficients(fit.method, Xb, d.y[idx])
    ok = np.isfinite(out).all(axis=1)
    alpha = 1.0 - fit.ci_level
    terms = []
    for j, name in enumerate(names):
        v = out[ok, j]
        lo, hi = np.quantile(v, [alpha / 2, 1 - alpha / 2]) if len(v) > 1 else (math.nan,) * 2
        terms.append(
            {
                "term": name,
                "estimate": fit.terms[j]["estimate"],
                "bootstrap_se": _f(float(np.std(v, ddof=1)) if len(v) > 1 else math.nan),
                "ci": [_f(float(lo)), _f(float(hi))],
            }
        )
    return {
        "method": "case bootstrap (percentile)",
        "resamples": int(resamples),
        "seed": int(seed),
        "failed": int((~ok).sum()),
        "ci_level": fit.ci_level,
        "terms": terms,
    }


def jackknife_terms(
    table: pd.DataFrame,
    fit: MultipleFit,
    *,
    taxon_col: str = "taxon",
    fit_options: Mapping[str, Any] | None = None,
) -> dict:
    """Leave-one-taxon-out jackknife of every term: the model refitted without each taxon of
    the fit in turn; jackknife SE = sqrt((n-1)/n sum (b_(i) - mean)^2) (Efron & Tibshirani
    1993), beside the analytic SE. PGLS refits hold Pagel's lambda at the full-data estimate
    (the tree pruned of the taxon). Rows ``{"term", "jackknife_se", "analytic_se", "ratio",
    "largest_shift": {"taxon", "shift_se"}}``."""
    from comparo.fitting.multiple import multiple_fit

    if taxon_col not in table.columns:
        return {"note": f"no {taxon_col!r} column: the taxa cannot be left out one at a time"}
    opts = dict(fit_options or {})
    if fit.method == "pgls":
        opts["lambda_"] = fit.lambda_
    labels = table[taxon_col].astype(str)
    used = [t for t in dict.fromkeys(labels) if t not in {e["label"] for e in fit.excluded}]
    names = [t["term"] for t in fit.terms]
    est = np.full((len(used), len(names)), np.nan)
    for i, lab in enumerate(used):
        try:
            sub = multiple_fit(
                table[labels != lab],
                fit.y,
                list(fit.predictors),
                factor=fit.factor,
                method=fit.method,
                log=fit.log,
                ci=fit.ci_level,
                taxon_col=taxon_col,
                linear=list(fit.linear),
                **opts,
            )
        except UsageError:
            continue  # too few taxa or a lost factor level without this taxon
        got = {t["term"]: t["estimate"] for t in sub.terms}
        est[i] = [np.nan if got.get(nm) is None else got[nm] for nm in names]
    ok = np.isfinite(est).all(axis=1)
    n = int(ok.sum())
    rows = []
    for j, t in enumerate(fit.terms):
        v = est[ok, j]
        se = math.sqrt((n - 1) / n * float(np.sum((v - v.mean()) ** 2))) if n > 1 else math.nan
        shift = (v - t["estimate"]) / t["se"] if t["se"] else np.full(n, np.nan)
        k = int(np.nanargmax(np.abs(shift))) if n and np.isfinite(shift).any() else None
        rows.append(
            {
                "term": t["term"],
                "jackknife_se": _f(se),
                "analytic_se": t["se"],
                "ratio": _f(se / t["se"]) if t["se"] else None,
                "largest_shift": None
                if k is None
                else {
                    "taxon": [u for u, o in zip(used, ok, strict=True) if o][k],
                    "shift_se": _f(float(shift[k])),
                },
            }
        )
    note = None
    if fit.method == "pgls":
        note = "PGLS refits hold Pagel's lambda at the full-data estimate"
    return {"n": n, "skipped": int((~ok).sum()), "terms": rows, "note": note}


def measurement_error_terms(
    table: pd.DataFrame,
    d: Design,
    fit: MultipleFit,
    draws: int,
    seed: int,
    *,
    taxon_col: str = "taxon",
) -> dict:
    """Monte Carlo propagation of the per-taxon standard uncertainties (columns ``Q_u``) of y
    and of every numeric predictor into each term (JCGM 101:2008): each draw replaces every
    value of the fit's taxa by a draw of mean the value and sd ``Q_u`` (log-normal for a
    logged quantity, normal for one entered linearly), the model is refitted on the same taxa
    and ``spread`` is the sd of the term over the draws; ``total_se`` = sqrt(spread^2 + SE^2).
    PGLS draws hold Pagel's lambda at the full-data estimate; robust draws are capped at
    :data:`ROBUST_MC_CAP`. Values without ``Q_u`` are held fixed (``fixed`` counts them)."""
    from comparo.fitting.slope_spread import lognormal_draws

    out: dict[str, Any] = {"draws": int(draws), "seed": int(seed), "note": None}
    notes = []
    if fit.method == "robust" and draws > ROBUST_MC_CAP:
        notes.append(f"robust draws are refitted one at a time: {ROBUST_MC_CAP} of {draws} made")
        out["draws_asked"], draws = int(draws), ROBUST_MC_CAP
        out["draws"] = draws
    if fit.method == "pgls":
        notes.append("PGLS draws hold Pagel's lambda at the full-data estimate")
    if draws < 2 or taxon_col not in table.columns:
        out["note"] = "fewer than 2 draws asked" if draws < 2 else f"no {taxon_col!r} column"
        return out
    t = table.set_index(table[taxon_col].astype(str))
    if t.index.has_duplicates:
        out["note"] = "taxon labels repeat in the table; Monte Carlo not computed"
        return out
    rows = t.loc[list(d.labels)]
    tf = {"10": np.log10, "e": np.log, "none": np.asarray}[fit.log]
    rng = np.random.default_rng(seed)
    drawn, fixed = {}, {}
    for q in dict.fromkeys([fit.y, *fit.predictors]):
        v = np.asarray(rows[q], dtype=float)
        u = np.asarray(rows[f"{q}_u"], dtype=float) if f"{q}_u" in rows else np.zeros(len(v))
        u = np.nan_to_num(u, nan=0.0)
        fixed[q] = int(np.sum(~(u > 0)))
        if q in fit.linear or fit.log == "none":
            drawn[q] = v + u * rng.standard_normal((draws, len(v)))
        else:
            with np.errstate(divide="ignore", invalid="ignore"):
                drawn[q] = tf(lognormal_draws(v, u, draws, rng))
    lam = fit.lambda_ if fit.method == "pgls" else "ml"
    names = [t_["term"] for t_ in fit.terms]
    est = np.full((draws, len(names)), np.nan)
    for b in range(draws):
        cols = {**d.columns, **{q: drawn[q][b] for q in drawn}}
        db = replace(d, y=drawn[fit.y][b], columns=cols)
        if not all(np.isfinite(c).all() for c in (db.y, *(cols[p] for p in fit.predictors))):
            continue
        try:
            r = fit_design(
                db,
                fit.y,
                fit.predictors,
                method=fit.method,
                lambda_=lam,
                ci=fit.ci_level,
                log=fit.log,
            )
        except UsageError:
            continue
        est[b] = [x["estimate"] for x in r.terms]
    ok = np.isfinite(est).all(axis=1)
    if ok.sum() < draws:
        notes.append(f"{draws - int(ok.sum())} draw(s) gave no fit and were left out")
    terms = []
    for j, term in enumerate(fit.terms):
        s = float(np.std(est[ok, j], ddof=1)) if ok.sum() > 1 else math.nan
        se = term["se"] if term["se"] is not None else math.nan
        terms.append(
            {
                "term": term["term"],
                "mean": _f(float(np.mean(est[ok, j])) if ok.any() else math.nan),
                "spread": _f(s),
                "sampling_se": term["se"],
                "total_se": _f(math.hypot(s, se)),
            }
        )
    out |= {"fixed": fixed, "terms": terms, "note": "; ".join(notes) or None}
    return out


def resampling_lines(res: Mapping[str, Any]) -> list[str]:
    """The bootstrap, jackknife and measurement-error parts as text."""
    lines: list[str] = []
    b = res.get("bootstrap")
    if b:
        lines.append(
            f"{b['method']}, {b['resamples']} resamples (seed {b['seed']}"
            + (f", {b['failed']} singular left out" if b["failed"] else "")
            + f"), {100 * b['ci_level']:g}% intervals:"
        )
        lines += [
            f"  {t['term']}: SE {number(t['bootstrap_se'])}, "
            f"[{number(t['ci'][0])}, {number(t['ci'][1])}]"
            for t in b["terms"]
        ]
    j = res.get("jackknife")
    if j and "terms" in j:
        lines.append(f"leave one taxon out (jackknife, {j['n']} refits):")
        for t in j["terms"]:
            s = t["largest_shift"]
            most = f"; most influential {s['taxon']} ({number(s['shift_se'])} SE)" if s else ""
            lines.append(
                f"  {t['term']}: jackknife SE {number(t['jackknife_se'])}, analytic SE "
                f"{number(t['analytic_se'])}{most}"
            )
        if j.get("note"):
            lines.append(f"  {j['note']}")
    m = res.get("measurement_error")
    if m:
        lines.append(f"measurement error (Monte Carlo, {m['draws']} draws, seed {m['seed']}):")
        lines += [
            f"  {t['term']}: spread {number(t['spread'])}, sampling SE {number(t['sampling_se'])}, "
            f"total SE {number(t['total_se'])}"
            for t in m.get("terms", [])
        ]
        if m.get("fixed"):
            held = ", ".join(f"{q} {k}" for q, k in m["fixed"].items() if k)
            if held:
                lines.append(f"  values without an uncertainty (held fixed): {held}")
        if m.get("note"):
            lines.append(f"  {m['note']}")
    return lines
