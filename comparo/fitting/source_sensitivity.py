"""Which sources drive a scaling fit: leave-one-source-out, basis filters,
leave-one-taxon-out jackknife and Monte Carlo propagation of measurement error.

Every number here comes from refitting the same line (:func:`comparo.fitting.fit`)
on a changed input; the verdict line is built only from those numbers.

References
----------
Quenouille, M. H. (1956) Notes on bias in estimation. Biometrika 43, 353-360.
Efron, B. (1982) The Jackknife, the Bootstrap and Other Resampling Plans. SIAM.
JCGM 101:2008 Evaluation of measurement data - Supplement 1 to the GUM:
propagation of distributions using a Monte Carlo method.
Fuller, W. A. (1987) Measurement Error Models. Wiley.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from comparo.base.errors import UsageError
from comparo.base.jsonsafe import json_safe as _json
from comparo.fitting.core import slope_from_moments
from comparo.fitting.resampling import _jackknife_moments, _progress_bar
from comparo.fitting.result import FitResult
from comparo.fitting.scaling import fit, renamed_against

BASIS_STEPS = ("reported", "computed", "digitized", "proxy", "assumed")
#: A refit that moves the slope by at least this many analytic SEs counts as influential.
SHIFT_THRESHOLD = 1.0
_MOMENT_METHODS = ("ols", "sma", "ma")


def _loso_lines(
    rows: list[dict], total: int, fitted: str, refit: Callable[[dict], str]
) -> list[str]:
    """The leave-one-source-out lines of a summary: a heading for *total* sources, then one
    line per row of *rows*: ``refit(row)`` when its *fitted* key holds a refit, else why not."""
    out = [f"  leave one source out ({total} sources), most influential first:"]
    for r in rows:
        head = f"    without {r['source_id']:<12} "
        if r[fitted] is None:
            out.append(f"{head}{r['n']} taxa left  {r.get('note') or 'not refitted'}")
        else:
            out.append(f"{head}n {r['n']:>4}  {refit(r)}")
    return out


@dataclass(frozen=True)
class SensitivityResult:
    """How much the fitted slope depends on single sources, bases, taxa and measurement error.

    Attributes
    ----------
    method, x, y : str
    slope : float
        Slope of the fit on all data (dimensionless on log-log axes).
    slope_se : float
        Its analytic standard error (see :func:`analytic_se`).
    ci_level : float
    test : dict or None
        ``{"value", "p"}`` of the full fit's slope test.
    leave_one_source_out : list of dict or None
        ``{"source_id", "n", "slope", "slope_ci", "p", "shift_se", "flips", "note"}``,
        most influential (largest ``|shift_se|``) first; ``shift_se`` = (slope
        without the source - slope) / slope_se. ``n`` is the taxa refitted, or when
        the line could not be refitted (``slope`` None) the taxa left with both
        values, ``note`` saying why. None for a plain table.
    by_basis : list of dict or None
        ``{"bases", "n", "slope", "slope_ci", "p", "shift_se", "ci_change"}``,
        one step per cumulative basis set (reported, + computed, ...);
        ``shift_se`` and ``ci_change`` (relative change of CI width) against
        the step before. None for a plain table.
    jackknife_se : dict
        ``{"slope_jackknife", "slope_analytic", "ratio", "n"}`` (and ``"note"``
        when not computed, e.g. for pgls).
    measurement_error : dict
        ``{"draws", "seed", "slope_mean", "spread", "sampling_se", "total_se",
        "share", "fixed_x", "fixed_y", "note"}`` (``fixed_x``/``fixed_y``: taxa whose x/y
        has no uncertainty and is held fixed; ``"points"``: taxa drawn, once matched);
        ``"draws_asked"`` as well when the method's draws were capped (lts, pgls: :data:`MC_CAP`).
    verdict : str
    """

    method: str
    x: str
    y: str
    slope: float
    slope_se: float
    ci_level: float
    test: dict | None
    leave_one_source_out: list[dict] | None
    by_basis: list[dict] | None
    jackknife_se: dict
    measurement_error: dict
    verdict: str
    unavailable: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        """JSON-safe dict with the keys of the ``"sensitivity"`` contract (docs/sensitivity.md)."""
        return _json(
            {
                "leave_one_source_out": self.leave_one_source_out,
                "by_basis": self.by_basis,
                "jackknife_se": self.jackknife_se,
                "measurement_error": self.measurement_error,
                "verdict": self.verdict,
            }
        )

    def to_frame(self):
        """One row per refit: part (source/basis), what was changed, n, slope, CI, p, shift_se."""
        import pandas as pd

        rows = []
        for r in self.leave_one_source_out or []:
            rows.append(
                {
                    "part": "leave_one_source_out",
                    "changed": f"without {r['source_id']}",
                    "n": r["n"],
                    "slope": r["slope"],
                    "ci_low": r["slope_ci"][0],
                    "ci_high": r["slope_ci"][1],
                    "p": r["p"],
                    "shift_se": r["shift_se"],
                }
            )
        for r in self.by_basis or []:
            rows.append(
                {
                    "part": "by_basis",
                    "changed": "+".join(r["bases"]),
                    "n": r["n"],
                    "slope": r["slope"],
                    "ci_low": r["slope_ci"][0],
                    "ci_high": r["slope_ci"][1],
                    "p": r["p"],
                    "shift_se": r["shift_se"],
                }
            )
        return pd.DataFrame(
            rows, columns=["part", "changed", "n", "slope", "ci_low", "ci_high", "p", "shift_se"]
        )

    def _repr_html_(self) -> str:
        """Compact table for notebooks: the refits of :meth:`to_frame`, the jackknife and
        measurement-error standard errors, and the verdict."""
        from comparo.base.display import frame_html

        j, m = self.jackknife_se, self.measurement_error
        notes = [
            f"jackknife SE {_fmt(j.get('slope_jackknife'))}; analytic SE {_fmt(j.get('slope_analytic'))}"
        ]
        if m.get("spread") is not None:
            notes.append(
                f"measurement error ({m['draws']} draws): spread {_fmt(m['spread'])}, total SE {_fmt(m['total_se'])}"
            )
        notes += [f"not available: {u}" for u in self.unavailable]
        notes.append(f"verdict: {self.verdict}")
        title = f"sensitivity of the {self.method.upper()} slope {_fmt(self.slope)} (SE {_fmt(self.slope_se)})"
        return frame_html(title, self.to_frame(), notes)

    def summary(self, top: int = 5) -> str:
        """Plain-text account for people."""
        f = _fmt
        lines = [
            f"sensitivity of the {self.method.upper()} slope {f(self.slope)} (SE {f(self.slope_se)})"
        ]
        if self.leave_one_source_out is not None:

            def refit(r: dict) -> str:
                lo, hi = r["slope_ci"]
                flip = "  flips the test" if r["flips"] else ""
                return (
                    f"slope {f(r['slope'])}  CI {f(lo)} .. {f(hi)}  p {f(r['p'])}  "
                    f"shift {f(r['shift_se'])} SE{flip}"
                )

            lines += _loso_lines(
                self.leave_one_source_out[:top], len(self.leave_one_source_out), "slope", refit
            )
        if self.by_basis is not None:
            lines.append("  by basis (cumulative):")
            for r in self.by_basis:
                lo, hi = r["slope_ci"]
                lines.append(
                    f"    {'+'.join(r['bases']):<40} n {r['n']:>4}  slope {f(r['slope'])}  CI {f(lo)} .. {f(hi)}"
                )
        j = self.jackknife_se
        lines.append(
            f"  jackknife SE (leave one taxon out) {f(j['slope_jackknife'])}; analytic SE {f(j['slope_analytic'])}"
        )
        if j.get("note"):
            lines.append(f"    note: {j['note']}")
        m = self.measurement_error
        if m.get("spread") is not None:
            lines.append(
                f"  measurement error ({m['draws']} draws, seed {m['seed']}): spread {f(m['spread'])}, "
                f"sampling SE {f(m['sampling_se'])}, total {f(m['total_se'])}"
            )
        if m.get("note"):
            lines.append(f"    note: {m['note']}")
        lines += [f"  not available: {u}" for u in self.unavailable]
        lines.append(f"  verdict: {self.verdict}")
        return "\n".join(lines)


def _fmt(v: Any) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return f"{v:.4g}"


# --------------------------------------------------------------------------- pieces


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


def _transform(log: str, a: np.ndarray) -> np.ndarray:
    if log == "10":
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.log10(a)
    if log == "e":
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.log(a)
    return a


#: Monte Carlo draws are capped for methods refitted one draw at a time (seconds per 100 draws at n = 60 here).
MC_CAP = {"lts": 200, "pgls": 200}
#: LTS starts per Monte Carlo draw (random two-point starts; the full fit uses all pairs up to 3000).
MC_LTS_STARTS = 300


def huber_slopes(
    X: np.ndarray, Y: np.ndarray, c: float = 1.345, max_iter: int = 50, tol: float = 1e-10
) -> np.ndarray:
    """Huber M-estimate slopes of many data sets at once (rows of X and Y).

    The IRLS of statsmodels RLM (HuberT, scale = median|r|/0.6745 re-estimated
    each step, OLS start), run for all rows together until no coefficient moves
    more than *tol* (or *max_iter* steps); matches :func:`comparo.fitting.huber_line`
    to about 1e-8.
    """

    def wls(w):
        sw = w.sum(1, keepdims=True)
        xm, ym = (w * X).sum(1, keepdims=True) / sw, (w * Y).sum(1, keepdims=True) / sw
        b = (w * (X - xm) * (Y - ym)).sum(1) / (w * (X - xm) ** 2).sum(1)
        return ym[:, 0] - b * xm[:, 0], b

    a, b = wls(np.ones_like(X))
    for _ in range(max_iter):
        r = Y - a[:, None] - b[:, None] * X
        scale = np.median(np.abs(r), axis=1) / 0.6744897501960817
        with np.errstate(divide="ignore", invalid="ignore"):
            u = np.abs(r) / np.where(scale > 0, scale, 1.0)[:, None]
            w = np.where(u > c, c / u, 1.0)
        w[scale <= 0] = 1.0
        a2, b2 = wls(w)
        done = np.nanmax(np.abs(b2 - b)) <= tol and np.nanmax(np.abs(a2 - a)) <= tol
        a, b = a2, b2
        if done:
            break
    return b


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
    if method in _MOMENT_METHODS:
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
        from comparo.fitting import LTS_CUT, lts_fit, ols_line

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

        from comparo.phylo import phylo_fit, read_tree

        opts = {k: v for k, v in fit_options.items() if k in ("tree", "tree_labels", "reml")}
        if isinstance(opts.get("tree"), str):
            opts["tree"] = read_tree(opts["tree"])
        lam = result.lambda_ if result.lambda_ is not None else "ml"
        for k in np.flatnonzero(ok):
            t = pd.DataFrame({"taxon": labels, "x": X[k], "y": Y[k]})
            out[k] = phylo_fit(table=t, x="x", y="y", log="none", lambda_=lam, **opts)["slope"]
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
            f"{method} is refitted one draw at a time: {MC_CAP[method]} of the {mc} draws asked were made"
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
        labels = _pgls_labels(table, result, taxon_col)
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
    with _progress_bar(progress, mc) as bar:
        task = bar.add_task("measurement error", total=mc) if bar is not None else None
        for start in range(0, mc, chunk):
            k = min(chunk, mc - start)
            X = _transform(log, lognormal_draws(vals[x], us[x], k, rng))
            Y = _transform(log, lognormal_draws(vals[y], us[y], k, rng))
            slopes[start : start + k] = _draw_slopes(
                method, X, Y, labels, result, fit_options, seed
            )
            if bar is not None:
                bar.update(task, advance=k)
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
            f"{mc - int(ok.sum())} draw(s) gave no finite slope (non-positive draws on log axes) and were left out"
        )
    out["note"] = "; ".join(notes) or None
    return out


def _pgls_labels(table, result: FitResult, taxon_col: str) -> list[str]:
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
        labels = _pgls_labels(table, result, taxon_col)
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
            se_a = analytic_se(result)
            se_j = jackknife_se(b)
            return {
                "slope_jackknife": se_j,
                "slope_analytic": se_a,
                "ratio": se_j / se_a if se_a > 0 else None,
                "n": int(result.n),
                "note": "PGLS leave-one-out refits hold Pagel's lambda at the full-data estimate",
            }
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
    if result.method in _MOMENT_METHODS:
        b, _ = _jackknife_moments(result.method, X, Y)
    else:
        import pandas as pd

        b = np.empty(n)
        kw = {k: v for k, v in fit_kwargs.items() if k not in ("log", "taxon_col", "against")}
        for i in range(n):
            keep = np.arange(n) != i
            t = pd.DataFrame({"taxon": pts["label"][keep], "x": X[keep], "y": Y[keep]})
            b[i] = fit(t, "x", "y", log="none", **kw).slope
    se_a = analytic_se(result)
    se_j = jackknife_se(b)
    return {
        "slope_jackknife": se_j,
        "slope_analytic": se_a,
        "ratio": se_j / se_a if se_a > 0 else None,
        "n": int(n),
    }


def _refit(
    ds, h, rows, changed, base_table, x, y, method, kwargs
) -> tuple[FitResult | None, int, str | None]:
    """Refit after a change of the rows flagged ``changed``.

    Aggregation is per taxon, so only the taxa with a changed row are rebuilt
    (:func:`comparo.curation.harmonise.per_taxon` on their rows); the others keep their
    per-taxon values from ``base_table``.
    """
    table = _rebuilt(ds, h, rows, changed, base_table)
    if x not in table.columns or y not in table.columns:
        return None, 0, f"no {x if x not in table.columns else y} values remain"
    n_left = _points(table, x, y)
    try:
        return fit(table, x, y, method, **kwargs), n_left, None
    except UsageError as exc:
        return None, n_left, str(exc)


def _rebuilt(ds, h, rows, changed, base_table, keep_cols: tuple[str, ...] = ()):
    """The per-taxon table after a change of the rows flagged ``changed``: the taxa with a
    changed row rebuilt from their rows, the others as in ``base_table``; *keep_cols* (e.g. a
    factor) are carried over from ``base_table`` for the rebuilt taxa."""
    import pandas as pd

    from comparo.curation.harmonise import per_taxon

    touched = set(rows.loc[changed, "accepted"])
    sub_rows = rows[rows["accepted"].isin(touched)]
    sub = per_taxon(ds, harmonised=dataclasses.replace(h, rows=sub_rows))
    keep = base_table[~base_table["taxon"].isin(touched)]
    sub = sub[[c for c in keep.columns if c in sub.columns]].copy()
    for c in keep_cols:
        sub[c] = sub["taxon"].map(base_table.drop_duplicates("taxon").set_index("taxon")[c])
    return pd.concat([keep, sub], ignore_index=True).sort_values("taxon", kind="stable")


def _points(table, x: str, y: str) -> int:
    """Taxa with a positive finite x and y (the points a log-log refit could use)."""
    import pandas as pd

    xs = pd.to_numeric(table[x], errors="coerce").to_numpy(dtype=float)
    ys = pd.to_numeric(table[y], errors="coerce").to_numpy(dtype=float)
    return int(np.sum(np.isfinite(xs) & np.isfinite(ys) & (xs > 0) & (ys > 0)))


def _p(r: FitResult | None) -> float | None:
    return r.against["p"] if r is not None and r.against else None


def _record(
    r: FitResult | None, base_slope: float, se: float, n_left: int = 0, why: str | None = None
) -> dict:
    """One refit's numbers; *n_left* points remained when it could not be refitted (*why*)."""
    if r is None:
        return {
            "n": int(n_left),
            "slope": None,
            "slope_ci": [None, None],
            "p": None,
            "shift_se": None,
            "note": f"not refitted: {why}" if why else "not refitted",
        }
    shift = (r.slope - base_slope) / se if se > 0 else float("nan")
    return {
        "n": int(r.n),
        "slope": r.slope,
        "slope_ci": list(r.slope_ci),
        "p": _p(r),
        "shift_se": shift,
        "note": None,
    }


def _flips(p_full: float | None, p: float | None, alpha: float) -> bool:
    return p_full is not None and p is not None and (p_full < alpha) != (p < alpha)


# --------------------------------------------------------------------------- entry point


def sensitivity(
    dataset_or_table: Any,
    x: str,
    y: str,
    method: str = "sma",
    *,
    against: float | None = None,
    ci: float = 0.95,
    log: str = "10",
    mc: int = 1000,
    seed: int = 20240601,
    progress: bool = False,
    temperature: bool = True,
    taxon_col: str = "taxon",
    taxa: list[str] | None = None,
    no_sources: str | None = None,
    harmonised: Any = None,
    **fit_options: Any,
) -> SensitivityResult:
    """Source-level sensitivity and measurement-error propagation of a scaling fit.

    Parameters
    ----------
    dataset_or_table : comparo.Dataset or pandas.DataFrame
        A loaded dataset (all parts) or a per-taxon table (no source-level parts:
        a plain table does not say which source each value came from).
    x, y, method, against, ci, log
        As for :func:`comparo.fitting.fit`.
    mc : int
        Monte Carlo draws for the measurement-error part (0: skip).
    seed : int
        Seed of ``numpy.random.default_rng``.
    progress : bool
        Rich progress bars on standard error.
    taxa : list of str, optional
        Restrict a dataset to these accepted taxon names (used per group by
        :func:`sensitivity_by_group`).
    no_sources : str, optional
        For a table: why it records no source or basis per value (default: it is a
        plain table). Said in ``unavailable`` and the verdict; e.g. a table derived
        from a dataset folder, whose derived values rest on several sources each.
    harmonised : comparo.curation.harmonise.Harmonised, optional
        The dataset already harmonised with the same *temperature* (as
        :func:`comparo.curation.harmonise.harmonise` returned it), so that it is not
        harmonised again (the report passes the one it made).
    **fit_options
        Further options of :func:`comparo.fitting.fit` (e.g. ``tree`` for pgls).

    Returns
    -------
    SensitivityResult

    Notes
    -----
    Leave-one-source-out drops every row of a source and rebuilds the per-taxon
    table, so a taxon measured by two sources keeps the other source's value.
    ``shift_se`` = (b_without - b) / SE(b). A source "flips" the test when the
    slope test's p falls on the other side of alpha = 1 - ci. The jackknife
    leaves out one taxon at a time (Quenouille 1956; Efron 1982). The Monte Carlo
    follows JCGM 101:2008.
    """
    import pandas as pd

    from comparo.base.arguments import check_count, check_draws, check_kind, check_level, check_seed
    from comparo.validation.dataset import Dataset

    check_kind(
        dataset_or_table,
        (Dataset, pd.DataFrame),
        "dataset_or_table",
        "a Dataset (comparo.load(FOLDER)) or a per-taxon DataFrame (comparo.per_taxon)",
    )
    mc = check_count(mc, "mc")
    seed = check_seed(seed, "seed")
    ci = check_level(ci)
    against = renamed_against(fit_options, against)
    alpha = 1 - ci
    kw = dict(against=against, ci=ci, log=str(log), taxon_col=taxon_col, **fit_options)
    unavailable = []
    ds = dataset_or_table if isinstance(dataset_or_table, Dataset) else None
    if ds is not None:
        from comparo.curation.harmonise import harmonise, per_taxon

        h = harmonised if harmonised is not None else harmonise(ds, temperature=temperature)
        if taxa is not None:
            h = dataclasses.replace(
                h, rows=h.rows[h.rows["accepted"].astype(str).isin(set(map(str, taxa)))]
            )
        table = per_taxon(ds, harmonised=h)
    else:
        table = dataset_or_table
        why = no_sources or "a plain table does not record the source and basis of each value"
        unavailable.append(
            f"leave-one-source-out and basis filters need values with one source each ({why})"
        )
    base = fit(table, x, y, method, **kw)
    check_draws(mc, base.n, method, "mc")  # the bound of the command line, before the draws
    se = analytic_se(base)
    p_full = _p(base)
    loso = by_basis = None
    if ds is not None:
        if x not in table.columns or y not in table.columns:
            raise UsageError(
                f"{x!r} and {y!r} must both be quantities of the dataset for the source-level parts"
            )
        rows = h.rows[h.rows["quantity_key"].isin([x, y])].copy()
        cols = [taxon_col] + [
            c for c in table.columns if c.startswith((f"{x}", f"{y}")) and c != taxon_col
        ]
        xy_table = table[[c for c in dict.fromkeys(["taxon", *cols]) if c in table.columns]]
        used = rows[rows["status"] == "used"]
        refit = functools.partial(
            _refit, ds, h, base_table=xy_table, x=x, y=y, method=method, kwargs=kw
        )
        loso = _leave_one_source_out(rows, used, refit, base, se, p_full, alpha, progress)
        by_basis = _basis_steps(rows, used, refit, base, alpha)
    jack = taxon_jackknife(base, kw, table=table)
    me = measurement_error_mc(
        table,
        base,
        log=str(log),
        mc=mc,
        seed=seed,
        taxon_col=taxon_col,
        progress=progress,
        fit_options=fit_options,
    )
    verdict = make_verdict(
        loso,
        by_basis,
        jack,
        me,
        against=against,
        unavailable=(no_sources or "a plain table") if unavailable else False,
    )
    test = {"value": against, "p": p_full} if against is not None else None
    return SensitivityResult(
        method=method,
        x=x,
        y=y,
        slope=base.slope,
        slope_se=se,
        ci_level=float(ci),
        test=test,
        leave_one_source_out=loso,
        by_basis=by_basis,
        jackknife_se=jack,
        measurement_error=me,
        verdict=verdict,
        unavailable=tuple(unavailable),
    )


def _leave_one_source_out(
    rows, used, refit, base: FitResult, se: float, p_full, alpha: float, progress: bool
) -> list[dict]:
    """Refit without each source in turn; most influential (largest |shift_se|) first."""
    loso = []
    for sid, r, changed in _without_each_source(rows, used, progress):
        res, n_left, why = refit(rows=r, changed=changed)
        rec = {"source_id": sid, **_record(res, base.slope, se, n_left, why)}
        rec["flips"] = _flips(p_full, rec["p"], alpha)
        loso.append(rec)
    loso.sort(
        key=lambda d: (
            -abs(d["shift_se"])
            if d["shift_se"] is not None and math.isfinite(d["shift_se"])
            else 0.0
        )
    )
    return loso


def _without_each_source(rows, used, progress: bool):
    """For each source of the *used* rows, in order of its id: ``(source_id, rows with that
    source's rows excluded, mask of those rows)``, with a progress bar when asked."""
    sources = sorted(used["source_id"].astype(str).unique())
    with _progress_bar(progress, len(sources)) as bar:
        task = bar.add_task("leave one source out", total=len(sources)) if bar is not None else None
        for sid in sources:
            r = rows.copy()
            changed = (r["source_id"].astype(str) == sid).to_numpy()
            r.loc[changed, "status"] = "excluded"
            yield sid, r, changed
            if bar is not None:
                bar.update(task, advance=1)


def _basis_steps(rows, used, refit, base: FitResult, alpha: float) -> list[dict]:
    """Refit on the reported values only, then adding one weaker basis at a time."""
    by_basis = []
    prev = None
    present = set(used["basis_effective"])
    for k in range(len(BASIS_STEPS)):
        bases = BASIS_STEPS[: k + 1]
        if k > 0 and BASIS_STEPS[k] not in present:
            continue
        r = rows.copy()
        changed = (~r["basis_effective"].isin(bases)).to_numpy()
        r.loc[changed, "status"] = "excluded"
        res, n_left, why = (
            (base, base.n, None) if set(present) <= set(bases) else refit(rows=r, changed=changed)
        )
        ref_se = analytic_se(prev) if prev is not None else float("nan")
        rec = {
            "bases": list(bases),
            **_record(res, prev.slope if prev is not None else float("nan"), ref_se, n_left, why),
        }
        if prev is None:
            rec["shift_se"] = None
        width = (res.slope_ci[1] - res.slope_ci[0]) if res is not None else float("nan")
        pw = (prev.slope_ci[1] - prev.slope_ci[0]) if prev is not None else float("nan")
        rec["ci_change"] = width / pw - 1 if prev is not None and pw > 0 else None
        rec["flips"] = _flips(_p(prev), rec["p"], alpha) if prev is not None else False
        by_basis.append(rec)
        if res is not None:
            prev = res
    return by_basis


def make_verdict(loso, by_basis, jack, me, *, against=None, unavailable: bool | str = False) -> str:
    """One plain-language line built only from the sensitivity numbers.

    *unavailable*: the source-level parts did not run; a string says why (True: a
    plain table).

    A source (or a basis step) counts as influential when it moves the slope by
    at least ``SHIFT_THRESHOLD`` analytic SEs or flips the slope test.
    """
    parts = []
    if loso is not None:
        hit = [
            r
            for r in loso
            if r["flips"]
            or (
                r["shift_se"] is not None
                and math.isfinite(r["shift_se"])
                and abs(r["shift_se"]) >= SHIFT_THRESHOLD
            )
        ]
        mark = f"{SHIFT_THRESHOLD:g} SE or more" + (
            " or flips the test" if against is not None else ""
        )
        if not loso:
            parts.append("no sources to leave out")
        elif not hit:
            parts.append(f"no single source moves the slope by {mark}")
        else:
            words = []
            for r in hit[:3]:
                bits = (
                    [f"{r['shift_se']:+.1f} SE"]
                    if r["shift_se"] is not None and math.isfinite(r["shift_se"])
                    else []
                )
                bits += ["flips the test"] if r["flips"] else []
                words.append(f"{r['source_id']} ({', '.join(bits)})")
            more = f" and {len(hit) - 3} more" if len(hit) > 3 else ""
            parts.append(
                f"leaving out one source moves the slope by {mark}: {', '.join(words)}{more}"
            )
    elif unavailable:
        why = unavailable if isinstance(unavailable, str) else "a plain table"
        parts.append(
            f"source-level checks not available ({why})"
            if why != "a plain table"
            else "source-level checks not available for a plain table"
        )
    for r in (by_basis or [])[1:]:
        added = r["bases"][-1]
        moved = (
            r["shift_se"] is not None
            and math.isfinite(r["shift_se"])
            and abs(r["shift_se"]) >= SHIFT_THRESHOLD
        )
        widened = r["ci_change"] is not None and r["ci_change"] >= 0.2
        if moved or r["flips"] or widened:
            bits = []
            if moved:
                bits.append(f"slope moves {r['shift_se']:+.1f} SE")
            if r["flips"]:
                bits.append("flips the test")
            if r["ci_change"] is not None:
                bits.append(
                    f"CI {'widens' if r['ci_change'] >= 0 else 'narrows'} {abs(100 * r['ci_change']):.0f}%"
                )
            parts.append(f"sensitive to {added} values ({', '.join(bits)})")
    if jack.get("ratio") is not None and math.isfinite(jack["ratio"]) and jack["ratio"] > 1.5:
        parts.append(
            f"jackknife SE {jack['ratio']:.1f}x the analytic SE (a few taxa carry the fit)"
        )
    if me.get("share") is not None:
        share = me["share"]
        fixed = _not_propagated(me)
        where = " where known" if fixed else ""
        if share >= 0.5:  # one measure throughout: the share of the slope variance
            parts.append(
                f"measurement error{where} dominates the slope uncertainty "
                f"({100 * share:.0f}% of the slope variance)"
            )
        elif share >= 0.1:
            parts.append(
                f"measurement error{where} accounts for {100 * share:.0f}% of the slope variance"
            )
        else:
            parts.append(
                f"measurement error{where} under 10% of the slope variance"
                if fixed
                else "measurement error negligible (under 10% of the slope variance)"
            )
        if fixed:
            parts.append(fixed)
    return "; ".join(parts) if parts else "nothing to report"


def _not_propagated(me: dict) -> str:
    """'not propagated: no x uncertainty for 12 of 57 taxa, ...' or '' when every value had one."""
    n = me.get("points")
    of = f" of {n}" if n else ""
    bits = [
        f"no {axis} uncertainty for {me[f'fixed_{axis}']}{of} taxa"
        for axis in ("x", "y")
        if me.get(f"fixed_{axis}")
    ]
    return f"not propagated: {', '.join(bits)} (held fixed in the draws)" if bits else ""


def with_sensitivity(
    fit_result: FitResult,
    sens: SensitivityResult,
    by_group: dict[str, SensitivityResult | str] | None = None,
) -> FitResult:
    """The fit result with its ``sensitivity`` field filled from ``sens.to_dict()``.

    With *by_group* (from :func:`sensitivity_by_group`) the field also holds
    ``"by_group"``: group -> that group's sensitivity dict, or ``{"note"}``
    saying why it was not computed.
    """
    d = sens.to_dict()
    if by_group is not None:
        d["by_group"] = {
            str(g): (v.to_dict() if isinstance(v, SensitivityResult) else {"note": v})
            for g, v in by_group.items()
        }
    return dataclasses.replace(fit_result, sensitivity=d)


def sensitivity_by_group(
    dataset_or_table: Any,
    x: str,
    y: str,
    method: str = "sma",
    *,
    by: str,
    taxon_col: str = "taxon",
    temperature: bool = True,
    **options: Any,
) -> dict[str, SensitivityResult | str]:
    """:func:`sensitivity` within each group of column *by* (e.g. a clade from taxa.csv).

    Returns group -> :class:`SensitivityResult`, or a message saying why that
    group could not be analysed (e.g. fewer than 3 usable taxa); every group
    of the per-taxon table appears, in sorted order.
    """
    from comparo.validation.dataset import Dataset

    if isinstance(dataset_or_table, Dataset):
        from comparo.curation.harmonise import per_taxon

        table = per_taxon(dataset_or_table, temperature=temperature)
    else:
        table = dataset_or_table
    if by not in table.columns:
        raise UsageError(
            f"--by column {by!r} is not in the per-taxon table; columns are: "
            f"{', '.join(map(str, list(table.columns)[:20]))}"
        )
    out: dict[str, SensitivityResult | str] = {}
    groups = table[by].dropna().astype(str)
    for g in sorted(groups.unique()):
        taxa = (
            table.loc[groups[groups == g].index, taxon_col].astype(str).tolist()
            if taxon_col in table.columns
            else None
        )
        try:
            if isinstance(dataset_or_table, Dataset):
                out[g] = sensitivity(
                    dataset_or_table,
                    x,
                    y,
                    method,
                    taxon_col=taxon_col,
                    temperature=temperature,
                    taxa=taxa,
                    **options,
                )
            else:
                sub = table.loc[groups[groups == g].index]
                out[g] = sensitivity(
                    sub, x, y, method, taxon_col=taxon_col, temperature=temperature, **options
                )
        except UsageError as exc:
            out[g] = f"not computed for group {g}: {exc}"
    return out


# --------------------------------------------------------------------------- several predictors


@dataclass(frozen=True)
class MultipleSensitivity:
    """How much the coefficients of a multiple regression depend on single sources.

    Attributes
    ----------
    method, y : str
    predictors : tuple of str
    terms : dict
        term -> ``{"estimate", "se"}`` of the fit on all data (fitted log scale).
    leave_one_source_out : list of dict or None
        ``{"source_id", "n", "terms": {term: {"estimate", "shift_se"}}, "shift_se", "term",
        "p", "flips", "note"}``, most influential first; ``shift_se`` of a term is
        (b_without - b) / SE(b); the record's ``shift_se`` and ``term`` are those of the
        predictor or factor term moved most (the intercept is reported, not ranked). ``p`` is
        the joint ``against`` test's p without the source (None without ``against``).
        None for a plain table.
    verdict : str
    unavailable : tuple of str
    """

    method: str
    y: str
    predictors: tuple[str, ...]
    terms: dict
    leave_one_source_out: list[dict] | None
    verdict: str
    unavailable: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        """JSON-safe dict: ``leave_one_source_out``, ``terms``, ``verdict``, ``unavailable``."""
        return _json(
            {
                "leave_one_source_out": self.leave_one_source_out,
                "terms": self.terms,
                "verdict": self.verdict,
                "unavailable": list(self.unavailable),
            }
        )

    def summary(self, top: int = 5) -> str:
        """Plain-text account for people."""
        f = _fmt
        named = ", ".join(
            f"{t} {f(v['estimate'])} (SE {f(v['se'])})"
            for t, v in self.terms.items()
            if t != "intercept"
        )
        lines = [f"sensitivity of the {self.method.upper()} coefficients: {named}"]
        if self.leave_one_source_out is not None:

            def refit(r: dict) -> str:
                shifts = "  ".join(
                    f"{t} {f(v['estimate'])} ({f(v['shift_se'])} SE)"
                    for t, v in r["terms"].items()
                    if t != "intercept"
                )
                return shifts + ("  flips the joint test" if r["flips"] else "")

            lines += _loso_lines(
                self.leave_one_source_out[:top], len(self.leave_one_source_out), "terms", refit
            )
        lines += [f"  not available: {u}" for u in self.unavailable]
        lines.append(f"  verdict: {self.verdict}")
        return "\n".join(lines)


def multiple_sensitivity(
    dataset_or_table: Any,
    y: str,
    predictors: list[str],
    method: str = "ols",
    *,
    factor: str | None = None,
    against: dict[str, float] | None = None,
    ci: float = 0.95,
    log: str = "10",
    temperature: bool = True,
    taxon_col: str = "taxon",
    progress: bool = False,
    **fit_options: Any,
) -> MultipleSensitivity:
    """Leave-one-source-out for a multiple regression (:func:`comparo.fitting.multiple_fit`).

    Each source's rows are set aside in turn and the per-taxon table rebuilt as for the
    one-predictor :func:`sensitivity` (a taxon measured by two sources keeps the other's
    value); the model is refitted on it. ``shift_se`` = (b_without - b) / SE(b) for every
    term. A plain table records no source per value, so the part is then unavailable.
    *fit_options*: ``tree``, ``lambda_``, ``tree_labels`` for pgls. The jackknife and the
    measurement-error Monte Carlo of the one-predictor sensitivity are not computed here.
    """
    import pandas as pd

    from comparo.base.arguments import check_kind, check_level
    from comparo.fitting.multiple import multiple_fit
    from comparo.validation.dataset import Dataset

    check_kind(
        dataset_or_table,
        (Dataset, pd.DataFrame),
        "dataset_or_table",
        "a Dataset (comparo.load(FOLDER)) or a per-taxon DataFrame (comparo.per_taxon)",
    )
    ci = check_level(ci)
    predictors = list(predictors)
    kw = dict(
        factor=factor,
        method=method,
        log=str(log),
        ci=ci,
        taxon_col=taxon_col,
        against=against,
        **fit_options,
    )
    ds = dataset_or_table if isinstance(dataset_or_table, Dataset) else None
    unavailable = []
    if ds is not None:
        from comparo.curation.harmonise import harmonise, per_taxon

        h = harmonise(ds, temperature=temperature)
        table = per_taxon(ds, harmonised=h)
    else:
        table = dataset_or_table
        unavailable.append(
            "leave-one-source-out needs values with one source each (a plain table does "
            "not record the source of each value)"
        )
    missing = [c for c in [y, *predictors] if c not in table.columns]
    if ds is not None and missing:
        raise UsageError(
            f"{', '.join(map(repr, missing))} {'is not a quantity' if len(missing) == 1 else 'are not quantities'}"
            " of the dataset; leave-one-source-out needs measured quantities (a derived column "
            "rests on several sources per taxon)"
        )
    base = multiple_fit(table, y, predictors, **kw)
    terms = {t["term"]: {"estimate": t["estimate"], "se": t["se"]} for t in base.terms}
    p_full = None if base.against is None else base.against["p"]
    loso = None
    if ds is not None:
        rows = h.rows[h.rows["quantity_key"].isin([y, *predictors])].copy()
        stems = (y, *predictors)
        cols = [c for c in table.columns if c == "taxon" or c.startswith(stems) or c == factor]
        base_table = table[list(dict.fromkeys(["taxon", *cols]))]
        used = rows[rows["status"] == "used"]
        loso = []
        for sid, r, changed in _without_each_source(rows, used, progress):
            sub = _rebuilt(ds, h, r, changed, base_table, keep_cols=(factor,) if factor else ())
            loso.append(_multiple_record(sid, sub, y, predictors, kw, terms, p_full, 1 - ci))
        loso.sort(key=lambda d: -abs(d["shift_se"]) if d["shift_se"] is not None else 0.0)
    verdict = _multiple_verdict(loso, against is not None)
    return MultipleSensitivity(
        method, y, tuple(predictors), terms, loso, verdict, tuple(unavailable)
    )


def _multiple_record(
    sid: str, table, y: str, predictors: list[str], kw: dict, terms: dict, p_full, alpha: float
) -> dict:
    """One source left out: the refit's terms and shifts, or why there is none."""
    import pandas as pd

    from comparo.fitting.multiple import design, fit_design

    cols = [y, *predictors]
    n_left = 0
    if all(c in table.columns for c in cols):
        n_left = int(table[cols].apply(pd.to_numeric, errors="coerce").notna().all(axis=1).sum())
    pgls = kw["method"] == "pgls"
    try:  # multiple_fit without the flags (the refits need only the terms)
        d = design(
            table,
            y,
            predictors,
            factor=kw["factor"],
            log=kw["log"],
            taxon_col=kw["taxon_col"],
            tree=kw.get("tree") if pgls else None,
            tree_labels=kw.get("tree_labels"),
        )
        res = fit_design(
            d,
            y,
            predictors,
            method=kw["method"],
            lambda_=kw.get("lambda_", "ml"),
            ci=kw["ci"],
            log=kw["log"],
            against=kw["against"],
        )
    except UsageError as exc:
        return {
            "source_id": sid,
            "n": n_left,
            "terms": None,
            "shift_se": None,
            "term": None,
            "p": None,
            "flips": False,
            "note": str(exc),
        }
    out, best = {}, (None, None)
    for t in res.terms:
        ref = terms[t["term"]]
        shift = (t["estimate"] - ref["estimate"]) / ref["se"] if ref["se"] else None
        shift = shift if shift is not None and math.isfinite(shift) else None
        out[t["term"]] = {"estimate": t["estimate"], "shift_se": shift}
        if (
            t["term"] != "intercept"
            and shift is not None
            and (best[1] is None or abs(shift) > abs(best[1]))
        ):
            best = (t["term"], shift)
    p = None if res.against is None else res.against["p"]
    return {
        "source_id": sid,
        "n": int(res.n),
        "terms": out,
        "shift_se": best[1],
        "term": best[0],
        "p": p,
        "flips": _flips(p_full, p, alpha),
        "note": None,
    }


def _multiple_verdict(loso: list[dict] | None, tested: bool) -> str:
    """One line from the leave-one-source-out numbers of a multiple regression."""
    if loso is None:
        return "source-level checks not available for a plain table"
    if not loso:
        return "no sources to leave out"
    mark = f"{SHIFT_THRESHOLD:g} SE or more" + (" or flips the joint test" if tested else "")
    hit = [
        r
        for r in loso
        if r["flips"] or (r["shift_se"] is not None and abs(r["shift_se"]) >= SHIFT_THRESHOLD)
    ]
    if not hit:
        return f"no single source moves a coefficient by {mark}"
    words = []
    for r in hit[:3]:
        bits = [f"{r['term']} {r['shift_se']:+.1f} SE"] if r["shift_se"] is not None else []
        bits += ["flips the joint test"] if r["flips"] else []
        words.append(f"{r['source_id']} ({', '.join(bits)})")
    more = f" and {len(hit) - 3} more" if len(hit) > 3 else ""
    return f"leaving out one source moves a coefficient by {mark}: {', '.join(words)}{more}"
