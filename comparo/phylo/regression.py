"""Phylogenetic generalised least squares of a scaling line (PGLS) with Pagel's lambda,
measurement error and group (interaction) tests.

Grafen A (1989) The phylogenetic regression. Phil Trans R Soc B 326:119-157.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.errors import InputError, Problem, UsageError
from comparo.base.jsonsafe import finite_or_none as _f
from comparo.base.scales import LOG_SCALES, se_on_scale, to_scale
from comparo.phylo.flat import FlatTree, flat
from comparo.phylo.likelihood import Gls, fit_lambda, gls, lr
from comparo.phylo.tips import match_labels
from comparo.phylo.trees import as_topo

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


_CONVENTION = {  # REML? -> how the reported log-likelihood is defined
    True: "REML: -1/2[(n-p)ln(2*pi*s2) + ln|V| + ln|X'V^-1X| + (n-p)], no +1/2 ln|X'X| term",
    False: "ML: -1/2[n ln(2*pi*RSS/n) + ln|V| + n]",
}


def pgls(
    table: pd.DataFrame,
    x: str,
    y: str,
    *,
    tree: Any,
    log: str = "10",
    ci: float = 0.95,
    against: float | None = None,
    taxon_col: str = "taxon",
    lambda_: str | float = "ml",
    reml: bool = False,
    tree_labels: Mapping[str, str] | None = None,
    tip_se: str | bool | Mapping[str, float] | None = None,
    by: str | None = None,
) -> dict:
    """Phylogenetic generalised least squares of y on x with Pagel's lambda: the engine
    behind ``comparo.fit(..., method="pgls")``, which turns this record into a
    :class:`comparo.FitResult` (use that; this is for the fitting room and the reference tests).

    Model: Y = alpha + beta·X + e, e ~ N(0, V), V = sigma²·C(lambda) [+ diag(se²)],
    with X, Y the (log) values, C the BM covariance of the tree pruned to the
    matched taxa, and C(lambda) Pagel's transform (:func:`pagel_edges`).

    Parameters
    ----------
    table : DataFrame
        One row per taxon; columns *x*, *y*, *taxon_col* (and *by*, *tip_se*).
    x, y : str
        Column names (values in the table's canonical units).
    tree : dendropy.Tree or str
        The tree, or a Newick file/string (:func:`read_tree`).
    log : {"10", "e", "none"}
        Transform of both axes; the intercept is on that scale (lg a for "10").
    ci : float
        Confidence level of every interval.
    against : float, optional
        H0 slope value: t = (b - b0)/se(b), two-sided p from t(n - p).
    taxon_col : str
        Label column matched to tips (:func:`match_tips`).
    lambda_ : "ml" or float
        "ml": maximise the likelihood over [0, 1] and give the profile-likelihood CI
        and LR tests of lambda = 0 and lambda = 1; a number fixes lambda.
    reml : bool
        REML for the lambda search and the reported log-likelihood.
    tree_labels : dict, optional
        taxon -> tip label, used before name matching.
    tip_se : str, True, or dict, optional
        Standard uncertainty of y per taxon, in y's units on the data scale: a column
        name, True for the column ``f"{y}_u"``, or a dict label -> value. Moved to the
        fitted scale to first order (u/(y·ln 10) for log 10) and added as variance to
        the tip edges (Ives et al. 2007). Missing values count as 0 and are listed.
    by : str, optional
        Grouping column: separate intercepts and slopes per group (interaction
        model, lambda estimated in it), an F test of equal slopes and, given a
        common slope, of equal elevations.

    Returns
    -------
    dict
        The ``fit --format json`` keys (docs/cli.md), plus: ``slope_se``,
        ``intercept_se``, ``sigma2`` (BM rate, fitted-scale units² per branch-length
        unit), ``df``, ``likelihood`` ("ML" or "REML"), ``loglik_convention``,
        ``r2_kind``, ``lambda_tests`` (``lambda_0``, ``lambda_1``: loglik, statistic,
        p; None for a fixed lambda), ``group_tests`` (with *by*: ``common_slope``
        with the equal-slopes F test, ``elevation`` F test given the common slope,
        and the lambda of the interaction model), ``measurement_error``,
        ``tips_pruned`` (tips without usable data) and ``taxa_without_tips``.

    Notes
    -----
    beta = (X'V⁻¹X)⁻¹X'V⁻¹y (Grafen 1989). Without measurement error sigma² is
    profiled out: ML l = -½[n ln(2π RSS/n) + ln|C| + n], REML
    l_R = -½[(n-p) ln(2π RSS/(n-p)) + ln|C| + ln|X'C⁻¹X| + (n-p)] (no ½ln|X'X| term),
    and cov(beta) = RSS/(n-p)·(X'C⁻¹X)⁻¹, CIs with t(n-p). With measurement error
    sigma² is found numerically and cov(beta) = (X'V⁻¹X)⁻¹ at its estimate (t(n-p)
    quantiles kept). ``r2`` = 1 - RSS/RSS_0, both generalised residual sums of
    squares under the fitted V, RSS_0 of the intercept-only model: the share of
    phylogenetically weighted variance the line explains (not the OLS R²).
    All quantities come from :func:`gls_quantities` in O(n) per likelihood.
    References (Grafen 1989; Pagel 1999; Freckleton et al. 2002; Ives et al. 2007;
    Ho & Ané 2014) in full in :mod:`comparo.phylo`.
    """
    log = _check_options(table, x, y, log, ci, taxon_col, by)
    se_col, se_map = _tip_se_source(table, y, tip_se)
    topo = as_topo(tree)
    labels = [str(v) for v in table[taxon_col].tolist()]
    match = match_labels(topo, labels, tree_labels)
    xv = np.asarray(table[x], dtype=float)
    yv = np.asarray(table[y], dtype=float)
    tip_of = match.tip_of  # built on each access: once here
    keep, excluded, groups_of = _usable_rows(table, labels, xv, yv, x, y, log, by, tip_of)
    n = len(keep)
    need = 3 if by is None else 2 * len({groups_of[i] for i in keep}) + 1
    if n < need:
        raise UsageError(
            f"PGLS needs at least {need} taxa with x, y and a tip in the tree; {n} remain "
            f"({len(match.taxa_without_tips)} taxa not in the tree, {len(excluded)} excluded in "
            "all)"
        )
    ft, keep, pruned = pruned_tree(topo, keep, [tip_of[labels[i]] for i in keep])
    keep_labels = [labels[i] for i in keep]
    X1 = to_scale(xv[keep], log)
    Y = to_scale(yv[keep], log)
    se2, me_info = _measurement_error(table, keep, keep_labels, yv, log, se_col, se_map)

    lf = fit_lambda(ft, np.column_stack([np.ones(n), X1]), Y, lambda_, se2, reml, ci)
    line, extras = _line_keys(lf, n, ci, against)
    groups = group_tests = None
    if by is not None:
        groups, group_tests = _group_fit(
            ft, X1, Y, [groups_of[i] for i in keep], lambda_, se2, reml, ci
        )
    return _record(x, y, log, n, line, extras, groups, group_tests, excluded, reml, lf) | {
        "measurement_error": me_info,
        "tips_pruned": pruned,
        "taxa_without_tips": list(match.taxa_without_tips),
    }


def _record(x, y, log, n, line, extras, groups, group_tests, excluded, reml, lf) -> dict:
    """The record of :func:`pgls` (the ``fit --format json`` keys and the PGLS extras), in
    the order of docs/cli.md; :func:`pgls` adds the measurement error and the tip lists."""
    return {
        "method": "pgls",
        "x": x,
        "y": y,
        "log": log,
        "n": n,
        **line,
        "groups": groups,
        "outliers": [],
        "excluded": excluded,
        "breakpoint": None,
        "sensitivity": None,
        **extras,
        "likelihood": "REML" if reml else "ML",
        "loglik_convention": _CONVENTION[bool(reml)],
        "r2_kind": "generalised: 1 - RSS/RSS_null under the fitted phylogenetic covariance",
        "lambda_tests": _lambda_tests(lf),
        "group_tests": group_tests,
    }


def phylo_fit(table: pd.DataFrame, x: str, y: str, **options: Any) -> dict:
    """Deprecated name of :func:`pgls` (the same record, with a :class:`DeprecationWarning`).

    The public fit is ``comparo.fit(table, x, y, method="pgls", tree=...)``, a
    :class:`comparo.FitResult`; ``comparo.phylo_fit`` is that same fit.
    """
    import warnings

    warnings.warn(
        "comparo.phylo.phylo_fit is deprecated: use comparo.fit(table, x, y, method='pgls', "
        "tree=...) for the FitResult, or comparo.phylo.pgls for this record",
        DeprecationWarning,
        stacklevel=2,
    )
    return pgls(table, x, y, **options)


def pruned_tree(topo, keep: list[int], tips: list[str]):
    """The tree pruned to *tips* as a :class:`FlatTree`, the table rows in its tip order,
    and the tips pruned away."""
    ft = flat(topo, tips)
    row_of = {t: i for i, t in zip(keep, tips, strict=True)}
    used = set(tips)
    return ft, [row_of[t] for t in ft.tips], [t for t in topo.tips if t not in used]


def _line_keys(lf, n: int, ci: float, against: float | None) -> tuple[dict, dict]:
    """The line's contract keys (slope .. loglik) and its extras (standard errors, sigma², df)."""
    from scipy.special import stdtr, stdtrit  # t distribution, without importing scipy.stats

    g = lf.fit
    df = n - 2
    tq = float(stdtrit(df, 0.5 + ci / 2.0))
    se_b = np.sqrt(np.diag(g.cov))
    b0, b1 = float(g.beta[0]), float(g.beta[1])
    ts = None
    if against is not None:
        stat = (b1 - float(against)) / se_b[1]
        ts = {
            "value": float(against),
            "statistic": _f(stat),
            "test": "t",
            "df": int(df),
            "p": _f(2.0 * stdtr(df, -abs(stat))),
        }
    r2 = 1.0 - g.rss / g.rss_null if g.rss_null > 0 else math.nan
    line = {
        "slope": _f(b1),
        "slope_ci": [_f(b1 - tq * se_b[1]), _f(b1 + tq * se_b[1])],
        "intercept": _f(b0),
        "intercept_ci": [_f(b0 - tq * se_b[0]), _f(b0 + tq * se_b[0])],
        "r2": _f(r2),
        "ci_level": float(ci),
        "against": ts,
        "lambda": _f(lf.lam),
        "lambda_ci": None if lf.ci is None else [_f(lf.ci[0]), _f(lf.ci[1])],
        "loglik": _f(lf.loglik),
    }
    extras = {
        "slope_se": _f(se_b[1]),
        "intercept_se": _f(se_b[0]),
        "sigma2": _f(g.sigma2),
        "df": df,
    }
    return line, extras


def _check_options(
    table: pd.DataFrame, x: str, y: str, log: Any, ci: float, taxon_col: str, by: str | None
) -> str:
    """Log base, confidence level and the columns named; returns the log base as text."""
    from comparo.base.arguments import check_level, check_name, check_table

    check_table(table)
    for value, name in ((x, "x"), (y, "y"), (taxon_col, "taxon_col")):
        check_name(value, name)
    check_name(by, "by", optional=True)
    check_level(ci)
    log = "none" if log is None else str(log)
    if log not in LOG_SCALES:
        raise UsageError(f"log must be one of 10, e, none; got {log!r}")
    if not 0.0 < ci < 1.0:
        raise UsageError(f"ci must be in (0, 1), got {ci}")
    for col in [taxon_col, x, y] + ([by] if by else []):
        if col not in table.columns:
            raise UsageError(
                f"column {col!r} not in the table (columns: {', '.join(map(str, table.columns))})"
            )
    return log


def _tip_se_source(
    table: pd.DataFrame, y: str, tip_se: Any
) -> tuple[str | None, Mapping[str, float] | None]:
    """Where the tip standard uncertainties come from: a column, or a mapping label -> value."""
    se_col = None
    se_map: Mapping[str, float] | None = None
    if tip_se is True:
        se_col = f"{y}_u"
    elif isinstance(tip_se, str):
        se_col = tip_se
    elif isinstance(tip_se, Mapping):
        se_map = {str(k): v for k, v in tip_se.items()}
    if se_col is not None and se_col not in table.columns:
        raise UsageError(f"measurement-error column {se_col!r} not in the table")
    return se_col, se_map


def _usable_rows(
    table,
    labels: list[str],
    xv: np.ndarray,
    yv: np.ndarray,
    x: str,
    y: str,
    log: str,
    by: str | None,
    tip_of: Mapping[str, str],
) -> tuple[list[int], list[dict], np.ndarray | None]:
    """Rows with x, y (positive under a log), a group and a tip; the others with reasons.

    A group with a single usable taxon is excluded too (named in the reason)."""
    excluded: list[dict] = []
    keep: list[int] = []
    for i, lab in enumerate(labels):
        reasons = []
        for name, v in ((x, xv[i]), (y, yv[i])):
            if not math.isfinite(v):
                reasons.append(f"missing value of {name}")
            elif log != "none" and v <= 0:
                reasons.append(f"non-positive {name} under log {log}")
        if by is not None:
            gval = table[by].iloc[i]
            if gval is None or (isinstance(gval, float) and math.isnan(gval)):
                reasons.append(f"missing group in {by}")
        if lab not in tip_of:
            reasons.append("taxon not in the tree")
        if reasons:
            excluded.append({"label": lab, "reason": "; ".join(reasons)})
        else:
            keep.append(i)
    if by is None:
        return keep, excluded, None
    gcol = table[by].astype(str).to_numpy()
    counts: dict[str, int] = {}
    for i in keep:
        counts[gcol[i]] = counts.get(gcol[i], 0) + 1
    small = {g for g, c in counts.items() if c < 2}
    if small:
        for i in [i for i in keep if gcol[i] in small]:
            excluded.append(
                {"label": labels[i], "reason": f"only taxon of group {gcol[i]!r} in {by}"}
            )
        keep = [i for i in keep if gcol[i] not in small]
    return keep, excluded, gcol


def _measurement_error(
    table,
    keep: list[int],
    keep_labels: list[str],
    yv: np.ndarray,
    log: str,
    se_col: str | None,
    se_map: Mapping[str, float] | None,
) -> tuple[np.ndarray | None, dict | None]:
    """Tip variances on the fitted scale (se²) and their account, or (None, None) without tip
    errors."""
    if se_col is None and se_map is None:
        return None, None
    if se_col is not None:
        u = np.asarray(table[se_col], dtype=float)[keep]
    else:
        u = np.array([float(se_map.get(lab, math.nan)) for lab in keep_labels])
    if np.any(u < 0):
        bad = [keep_labels[i] for i in np.flatnonzero(u < 0)]
        raise InputError(
            [
                Problem(
                    "error",
                    "table",
                    None,
                    se_col,
                    bad[0],
                    "se-negative",
                    f"negative standard uncertainty for {', '.join(bad[:5])}",
                )
            ]
        )
    missing_se = [keep_labels[i] for i in np.flatnonzero(~np.isfinite(u))]
    u = np.where(np.isfinite(u), u, 0.0)
    se2 = se_on_scale(u, yv[keep], log) ** 2
    return se2, {
        "source": se_col if se_col else "mapping",
        "tips_with_error": int(np.sum(se2 > 0)),
        "missing_set_to_zero": missing_se,
    }


def _lambda_tests(lf) -> dict | None:
    """Likelihood-ratio tests of lambda = 0 and 1 (None when lambda was fixed)."""
    if lf.ll0 is None:
        return None
    return {
        "lambda_0": lr(lf.loglik, lf.ll0),
        "lambda_1": lr(lf.loglik, lf.ll1),
        "null_distribution": "chi2(1); conservative on the boundary of [0, 1]",
        "search_interval": [0.0, lf.top],
        "note": None
        if lf.top == 1.0
        else "tips with zero-length edges: lambda searched on [0, 1 - 1e-6]; 'lambda_1' is "
        "evaluated there",
    }


def _group_fit(
    ft: FlatTree,
    X1: np.ndarray,
    Y: np.ndarray,
    grp: list[str],
    lambda_: Any,
    se2: np.ndarray | None,
    reml: bool,
    ci: float,
) -> tuple[list, dict]:
    """Interaction model Y ~ group + group:X (lambda estimated in it); F tests of
    equal slopes (interaction) and, in the common-slope model, of equal elevations.
    With V fixed at the fitted lambda each F is the extra-sum-of-squares (Wald) F."""
    from scipy.special import fdtrc, stdtrit  # F and t, without importing scipy.stats

    levels = sorted(set(grp))
    G = len(levels)
    n = len(Y)
    D = np.column_stack([np.asarray([g == lv for g in grp], dtype=float) for lv in levels])
    Xint = np.column_stack([D, D * X1[:, None]])  # per-group intercepts and slopes
    lf = fit_lambda(ft, Xint, Y, lambda_, se2, reml, ci)
    lam = lf.lam
    full = lf.fit
    Xadd = np.column_stack([D, X1])
    add = gls(ft, Xadd, Y, lam, se2, reml)
    ones = np.column_stack([np.ones(n), X1])
    pooled = gls(ft, ones, Y, lam, se2, reml)
    df_full = n - 2 * G
    me = se2 is not None and np.any(se2 > 0)

    def ftest(small: Gls, big: Gls, q: int, df2: int, beta_idx: list[int] | None = None) -> dict:
        if me:  # Wald test on the contrasts of the big model (covariance not rescaled)
            Cm = np.zeros((q, big.beta.size))
            for j, (a, b) in enumerate(beta_idx or []):
                Cm[j, a], Cm[j, b] = 1.0, -1.0
            d = Cm @ big.beta
            stat = float(d @ np.linalg.solve(Cm @ big.cov @ Cm.T, d)) / q
        else:
            stat = ((small.rss - big.rss) / q) / (big.rss / df2)
        return {"statistic": _f(stat), "df1": q, "df2": df2, "p": _f(fdtrc(q, df2, stat))}

    tq = float(stdtrit(df_full, 0.5 + ci / 2.0))
    rows = []
    for j, lv in enumerate(levels):
        bi, bs = full.beta[j], full.beta[G + j]
        si, ss = math.sqrt(full.cov[j, j]), math.sqrt(full.cov[G + j, G + j])
        rows.append(
            {
                "group": lv,
                "n": int(D[:, j].sum()),
                "slope": _f(bs),
                "slope_ci": [_f(bs - tq * ss), _f(bs + tq * ss)],
                "intercept": _f(bi),
                "intercept_ci": [_f(bi - tq * si), _f(bi + tq * si)],
            }
        )
    slope_pairs = [(G + j, G + j + 1) for j in range(G - 1)]
    elev_pairs = [(j, j + 1) for j in range(G - 1)]
    tq_add = float(stdtrit(n - G - 1, 0.5 + ci / 2.0))
    sc = float(add.beta[G])
    sc_se = math.sqrt(add.cov[G, G])
    slopes = ftest(add, full, G - 1, df_full, slope_pairs)
    elev = ftest(pooled, add, G - 1, n - G - 1, elev_pairs)
    tests = {
        "common_slope": {
            "slope": _f(sc),
            "slope_ci": [_f(sc - tq_add * sc_se), _f(sc + tq_add * sc_se)],
            "test": "F (interaction)",
            "statistic": slopes["statistic"],
            "df": [slopes["df1"], slopes["df2"]],
            "p": slopes["p"],
        },
        "elevation": {
            "test": "F",
            "statistic": elev["statistic"],
            "df": [elev["df1"], elev["df2"]],
            "p": elev["p"],
            "means": [_f(v) for v in add.beta[:G]],
        },
        "shift": None,
        "lambda": _f(lam),
        "lambda_ci": None if lf.ci is None else [_f(lf.ci[0]), _f(lf.ci[1])],
        "loglik": _f(lf.loglik),
        "note": "F tests at the lambda of the interaction model (separate slopes and intercepts "
        "per group)",
    }
    return rows, tests
