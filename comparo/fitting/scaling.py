"""The scaling fit :func:`fit`: checks the options, prepares the table, fits the line and adds
flags, group comparisons, a breakpoint, a bootstrap and the refit without flagged points.
"""

from __future__ import annotations

import time
from dataclasses import replace
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.errors import UsageError
from comparo.base.scales import from_scale
from comparo.fitting.arrays import prepare
from comparo.fitting.breakpoint import segmented_line
from comparo.fitting.cautions import fit_cautions
from comparo.fitting.core import LOGS, METHODS
from comparo.fitting.dispatch import line_core
from comparo.fitting.groups import group_fits, judge_slopes
from comparo.fitting.resampling import bootstrap_line
from comparo.fitting.result import FitResult, FlaggedRefit

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


def renamed_against(options: dict, against: float | None) -> float | None:
    """Take the old keyword ``test_slope=`` out of *options* (renamed ``against=``), with a
    deprecation warning; ``against`` wins when both are given."""
    if "test_slope" not in options:
        return against
    import warnings

    old = options.pop("test_slope")
    warnings.warn(
        "test_slope= is renamed against=; the old keyword will be removed",
        DeprecationWarning,
        stacklevel=3,
    )
    return old if against is None else against


def fit(
    table: pd.DataFrame,
    x: str,
    y: str,
    method: str = "sma",
    *,
    by: str | None = None,
    against: float | None = None,
    ci: float = 0.95,
    log: str = "10",
    bootstrap: int = 0,
    seed: int = 20240601,
    taxon_col: str = "taxon",
    breakpoint: bool = False,
    progress: bool = False,
    drop_flagged: bool | str | list[str] | None = None,
    **pgls_options: Any,
) -> FitResult:
    """Fit the scaling line log y = alpha + beta log x.

    Parameters
    ----------
    table : pandas.DataFrame
        One row per taxon.
    x, y : str
        Value columns (for a comparo per-taxon table: quantity keys such as
        ``body_mass`` in its canonical unit).
    method : {"ols", "sma", "ma", "robust", "lts", "pgls"}
    by : str, optional
        Grouping column: per-group fits and tests for a common slope, equal
        elevation and no shift along the common axis.
    against : float, optional
        Hypothesised exponent to test against (e.g. 1 for isometry).
    ci : float
        Confidence level, in (0, 1).
    log : {"10", "e", "none"}
        Transform of both axes.
    bootstrap : int
        Resamples for percentile and BCa CIs (0: none).
    seed : int
        Seed of ``numpy.random.default_rng`` (bootstrap, LTS random starts).
    taxon_col : str
        Label column.
    breakpoint : bool
        Also fit a broken line (least squares, Muggeo 2003) with Davies' test.
    progress : bool
        Show a progress bar on standard error for a long bootstrap.
    drop_flagged : bool, str or list of str, optional
        Also refit without the points flagged by these rules and report the
        refit in ``refit_without_flagged`` beside the original (which is
        unchanged). ``True`` means the misfit rules (``bonferroni``,
        ``robust_weight``, ``lts_residual``); a comma list or list may name
        rules and groups (:func:`comparo.fitting.flags.drop_rules`). Default: no refit,
        nothing is ever dropped.
    **pgls_options
        Passed to :func:`comparo.phylo.pgls` (tree, lambda_, reml, tree_labels, tip_se).

    Returns
    -------
    FitResult

    Raises
    ------
    UsageError
        Unknown column or method, non-numeric column, bad option value, fewer
        than 3 usable points, or all x identical.

    Examples
    --------
    >>> import pandas as pd
    >>> t = pd.DataFrame({"taxon": list("abcd"), "m": [1, 10, 100, 1000], "f": [2, 4.1, 7.9, 16.2]})
    >>> r = fit(t, "m", "f", method="ols")
    >>> round(r.slope, 3)
    0.301
    """
    from comparo.base.arguments import check_finite, check_seed

    ci, bootstrap = _check_arguments(table, x, y, by, taxon_col, ci, bootstrap)
    seed = check_seed(seed, "seed")
    against = check_finite(renamed_against(pgls_options, against), "the slope to test against")
    log = _check_options(method, log, ci, bootstrap)
    if method == "pgls":
        opts = (by, bootstrap, breakpoint, drop_flagged, pgls_options)
        res = _pgls(table, x, y, log, ci, against, taxon_col, *opts)
    elif pgls_options:
        raise UsageError(f"options {', '.join(sorted(pgls_options))} apply only to method pgls")
    else:
        opts = (bootstrap, seed, taxon_col, breakpoint, progress, drop_flagged)
        res = _line(table, x, y, method, by, against, ci, log, *opts)
    return _with_temperature(res, table, taxon_col)


def _line(
    table: pd.DataFrame,
    x: str,
    y: str,
    method: str,
    by: str | None,
    against: float | None,
    ci: float,
    log: str,
    bootstrap: int,
    seed: int,
    taxon_col: str,
    breakpoint: bool,
    progress: bool,
    drop_flagged: Any,
) -> FitResult:
    """:func:`fit` of every method but pgls, on checked arguments (without the temperature
    account, which :func:`fit` adds)."""
    from comparo.base.arguments import check_bootstrap
    from comparo.fitting.flags import drop_rules, flag_points

    rules = drop_rules(drop_flagged)
    X, Y, labels, groups, excluded, rows_used = prepare(table, x, y, log, taxon_col, by)
    bootstrap = check_bootstrap(bootstrap, len(X), method)
    _check_points(method, X, Y, x, y, excluded)
    core = line_core(method, X, Y, ci, against, seed)
    if bootstrap and method in ("robust", "lts"):  # refitted per resample: bound by the time of one
        from comparo.base.arguments import check_refits  # more fit (the first one pays for imports)

        started = time.perf_counter()
        line_core(method, X, Y, ci, None, seed)
        check_refits(bootstrap, len(X), time.perf_counter() - started, method)
    notes = [core.note] if core.note else []
    flags = flag_points(
        X,
        Y,
        labels,
        weights=core.weights if method == "robust" else None,
        lts_std=core.lts_std if method == "lts" else None,
    )
    group_rows = group_tests = None
    if by:
        group_rows, group_tests, gnotes = group_fits(X, Y, groups, method, ci, against, seed)
        group_tests = judge_slopes(group_tests, ci)
        notes += gnotes
    bp = _breakpoint(X, Y, ci, log) if breakpoint else None
    boot = None
    if bootstrap:
        boot = bootstrap_line(
            method,
            X,
            Y,
            bootstrap,
            ci=ci,
            seed=seed,
            progress=progress and bootstrap * len(X) >= 200_000,
        )
    refit = None
    if drop_flagged:
        refit = _refit_without_flagged(
            table,
            flags.flags,
            rules,
            rows_used,
            core.slope,
            dict(
                x=x,
                y=y,
                method=method,
                by=by,
                against=against,
                ci=ci,
                log=log,
                bootstrap=bootstrap,
                seed=seed,
                taxon_col=taxon_col,
                breakpoint=breakpoint,
                progress=progress,
            ),
        )
    return FitResult(
        method=method,
        x=x,
        y=y,
        log=log,
        n=len(X),
        slope=core.slope,
        slope_ci=core.slope_ci,
        intercept=core.intercept,
        intercept_ci=core.intercept_ci,
        r2=core.r2,
        ci_level=float(ci),
        against=core.test,
        groups=group_rows,
        group_tests=group_tests,
        outliers=[f.to_dict() for f in flags.flags],
        excluded=excluded,
        breakpoint=bp,
        bootstrap=boot,
        points=_points(X, Y, labels, groups if by else None, core),
        notes=tuple(notes),
        refit_without_flagged=refit,
        cautions=fit_cautions(method, len(X), X, Y, group_rows),
    )


def phylo_fit(table: pd.DataFrame, x: str, y: str, *, tree: Any, **options: Any) -> FitResult:
    """Deprecated: ``fit(table, x, y, method="pgls", tree=tree, **options)``, which it calls.

    The same :class:`FitResult` as :func:`fit` with ``method="pgls"`` (the options are those of
    :func:`fit` and of :func:`comparo.phylo.pgls`: ``lambda_``, ``reml``, ``tree_labels``,
    ``tip_se``). Reading it by key as the old dict (``result["slope"]``) still works, with a
    :class:`DeprecationWarning` naming the attribute.
    """
    import warnings

    warnings.warn(
        "phylo_fit(table, x, y, tree=...) is deprecated: use "
        "fit(table, x, y, method='pgls', tree=...), which returns the same FitResult",
        DeprecationWarning,
        stacklevel=2,
    )
    return fit(table, x, y, "pgls", tree=tree, **options)


def _with_temperature(res: FitResult, table: pd.DataFrame, taxon_col: str) -> FitResult:
    """*res* with ``temperature``: what the harmonisation did to the temperature-sensitive
    values behind the fitted taxa (:func:`comparo.validation.temperature.fit_temperature`; None for
    a
    table that is not a comparo per-taxon table)."""
    from dataclasses import replace

    from comparo.validation.temperature import fit_temperature

    if taxon_col not in table:
        return res
    left_out = {str(e.get("label")) for e in res.excluded}
    labels = [t for t in table[taxon_col].astype(str) if t not in left_out]
    return replace(res, temperature=fit_temperature(table, (res.x, res.y), labels, taxon_col))


def _check_arguments(
    table: Any, x: Any, y: Any, by: Any, taxon_col: Any, ci: Any, bootstrap: Any
) -> tuple[float, int]:
    """The types of :func:`fit`'s arguments, and a label column given by name that is missing
    (the default ``taxon`` may be absent: points are then named by row). Returns the level
    and the resample count as float and int."""
    from comparo.base.arguments import (
        check_column,
        check_count,
        check_level,
        check_name,
        check_table,
    )

    check_table(table)
    check_name(x, "x")
    check_name(y, "y")
    check_name(by, "by", optional=True)
    check_name(taxon_col, "taxon_col")
    if taxon_col != "taxon":
        check_column(table, taxon_col, "taxon_col")
    return check_level(ci, "ci (--ci)"), check_count(bootstrap, "bootstrap")


def _check_options(method: str, log: Any, ci: float, bootstrap: int) -> str:
    """Method, log base, confidence level and resample count; returns the log base as text."""
    if method not in METHODS:
        raise UsageError(f"unknown method {method!r}; choose one of {', '.join(METHODS)}")
    log = str(log)
    if log not in LOGS:
        raise UsageError(f"--log must be one of 10, e, none (got {log!r})")
    if not 0 < ci < 1:
        raise UsageError(f"--ci must lie strictly between 0 and 1 (got {ci})")
    if bootstrap < 0:
        raise UsageError(
            f"--bootstrap must be 0 or a positive number of resamples (got {bootstrap})"
        )
    return log


def _pgls(
    table, x, y, log, ci, against, taxon_col, by, bootstrap, breakpoint, drop_flagged, options
) -> FitResult:
    """The PGLS fit, computed by :func:`comparo.phylo.pgls`, as a :class:`FitResult`."""
    from comparo.phylo import pgls

    if bootstrap or breakpoint:
        raise UsageError("--bootstrap and --breakpoint are not available for method pgls")
    if by is not None:
        options["by"] = by
    d = pgls(table=table, x=x, y=y, log=log, ci=ci, against=against, taxon_col=taxon_col, **options)
    if d.get("group_tests"):
        d["group_tests"] = judge_slopes(d["group_tests"], ci)
    res = FitResult.from_dict(d)
    res = replace(res, cautions=fit_cautions("pgls", res.n, groups=res.groups))
    if drop_flagged:
        from comparo.fitting.flags import drop_rules

        res = replace(
            res,
            refit_without_flagged=FlaggedRefit(
                drop_rules(drop_flagged),
                (),
                None,
                note=(
                    "pgls fits carry no outlier or influence flags here; nothing was dropped and "
                    "no refit was made"
                ),
            ),
        )
    return res


def _check_points(
    method: str, X: np.ndarray, Y: np.ndarray, x: str, y: str, excluded: list[dict]
) -> None:
    """Enough usable points, and x (and for model II, y) not all equal."""
    n = len(X)
    if n < 3:
        raise UsageError(
            f"{method} needs at least 3 usable points; {n} remain after excluding {len(excluded)} "
            f"row(s)"
            + (f" ({excluded[0]['label']}: {excluded[0]['reason']}, ...)" if excluded else "")
        )
    if np.ptp(X) == 0:
        raise UsageError(f"all usable x values ({x}) are identical: no slope can be fitted")
    if method in ("sma", "ma") and np.ptp(Y) == 0:
        raise UsageError(
            f"all usable y values ({y}) are identical: the {method.upper()} slope is undefined"
        )
    if method == "lts" and n < 5:
        raise UsageError(f"lts needs at least 5 usable points; {n} remain")


def _breakpoint(X: np.ndarray, Y: np.ndarray, ci: float, log: str) -> dict:
    """The broken-line fit with its breakpoint also on the data scale (``x``, ``x_ci``)."""
    if len(X) < 8:
        raise UsageError(f"a breakpoint fit needs at least 8 usable points; {len(X)} remain")
    bp = segmented_line(X, Y, ci)
    return {
        "x_log": bp["x_log"],
        "x": float(from_scale(bp["x_log"], log)),
        "x_ci": [float(from_scale(v, log)) for v in bp["x_log_ci"]],
        **{k: v for k, v in bp.items() if k not in ("x_log",)},
    }


def _points(X: np.ndarray, Y: np.ndarray, labels: list[str], groups, core) -> tuple[dict, ...]:
    """Per-point records on the fitted scale (label, x_fit, y_fit, fitted, residual, ...)."""
    points = []
    for i, lab in enumerate(labels):
        rec = {
            "label": lab,
            "x_fit": float(X[i]),
            "y_fit": float(Y[i]),
            "fitted": float(core.fitted[i]),
            "residual": float(Y[i] - core.fitted[i]),
        }
        if groups is not None:
            rec["group"] = groups[i]
        if core.weights is not None:
            rec["weight"] = float(core.weights[i])
        if core.lts_std is not None:
            rec["lts_std"] = float(core.lts_std[i])
        points.append(rec)
    return tuple(points)


def _refit_without_flagged(
    table, flags, rules: tuple[str, ...], rows_used: np.ndarray, slope: float, kw: dict
) -> FlaggedRefit:
    """Drop the rows of the points flagged by *rules* and fit again with the same options."""
    per_point: dict[int, dict] = {}
    for f in flags:
        if f.rule in rules:
            d = per_point.setdefault(f.index, {"label": f.label, "rules": [], "reasons": []})
            if f.rule not in d["rules"]:
                d["rules"].append(f.rule)
            d["reasons"].append(f.reason)
    dropped = tuple(per_point[i] for i in sorted(per_point))
    if not dropped:
        return FlaggedRefit(
            rules, (), None, None, note="no point breaks the chosen rules; nothing was dropped"
        )
    pos = rows_used[sorted(per_point)]
    sub = table.drop(index=table.index[pos])
    try:
        r = fit(sub, **kw)
    except UsageError as exc:
        return FlaggedRefit(rules, dropped, None, None, note=f"no refit: {exc}")
    return FlaggedRefit(rules, dropped, r, r.slope - slope)
