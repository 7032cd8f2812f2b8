"""A multiple regression fitted within each group of a column (``comparo fit --x X1 --x X2
--by COLUMN``), with, for OLS, the F test of common exponents: separate regressions in the
groups against one set of exponents with a separate elevation per group (the test of parallel
regression planes of the analysis of covariance; Sokal & Rohlf 1995, Biometry, ch. 14).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.errors import UsageError
from comparo.base.jsonsafe import finite_or_none as _f
from comparo.base.numbers import number

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

#: Why there is no common-exponents test for PGLS and robust fits, said where it is missing.
NO_COMMON_TEST = (
    "no test of common exponents for {method}: the groups are fitted separately ({why}); for "
    "one set of exponents with a separate elevation per group use --factor {by}, and compare "
    "it with the pooled model by `comparo compare`"
)


def multiple_by(
    table: pd.DataFrame,
    y: str,
    predictors: Sequence[str],
    by: str,
    *,
    method: str = "ols",
    log: str = "10",
    ci: float = 0.95,
    taxon_col: str = "taxon",
    linear: Sequence[str] | None = None,
    **fit_options: Any,
) -> dict:
    """Fit y ~ predictors in each level of *by* (sorted; rows without a level are listed).

    Returns ``{"by", "groups": [{"group", "n", "terms", "loglik", "aicc", "k", "lambda"}
    or {"group", "n_rows", "error"}], "missing_group": [labels], "common_exponents"}``;
    ``common_exponents`` (OLS) is ``{"statistic", "df": [q, n - G p], "p", "test"}``, the
    F of the separate fits' residual sum of squares against that of the model with common
    exponents and a separate intercept per group, on the taxa of the groups that could be
    fitted; for robust and PGLS it is ``{"note"}`` saying why not and what to use.
    """
    from comparo.fitting.multiple import design, linear_predictors, multiple_fit

    if by not in table.columns:
        raise UsageError(f"--by {by!r}: no such column (columns: {', '.join(table.columns)})")
    if by in (y, *predictors):
        raise UsageError(f"--by {by!r} is also a variable of the model")
    col = table[by]
    blank = col.isna() | (col.astype(str).str.strip() == "")
    labels = table[taxon_col].astype(str) if taxon_col in table.columns else table.index
    levels = sorted(set(col[~blank].astype(str)))
    if len(levels) < 2:
        raise UsageError(f"--by {by!r} has {len(levels)} group(s); it needs at least two")
    groups, fitted = [], []
    for g in levels:
        part = table[(col.astype(str) == g) & ~blank]
        try:
            r = multiple_fit(
                part, y, list(predictors), method=method, log=log, ci=ci,
                taxon_col=taxon_col, linear=linear, **fit_options,
            )  # fmt: skip
        except UsageError as exc:
            groups.append({"group": g, "n_rows": len(part), "error": str(exc)})
            continue
        fitted.append(g)
        d = r.to_dict()
        groups.append(
            {"group": g, **{k: d[k] for k in ("n", "terms", "loglik", "aicc", "k", "lambda")}}
        )
    out = {
        "by": by,
        "groups": groups,
        "missing_group": [str(v) for v in labels[blank]],
    }
    if method != "ols":
        why = (
            "each group has its own Pagel's lambda and tree"
            if method == "pgls"
            else "an M-estimate has no residual sum of squares to compare"
        )
        out["common_exponents"] = {"note": NO_COMMON_TEST.format(method=method, why=why, by=by)}
        return out
    if len(fitted) < 2:
        out["common_exponents"] = {"note": "fewer than two groups could be fitted"}
        return out
    rows = table[col.astype(str).isin(fitted) & ~blank]
    d = design(rows, y, list(predictors), factor=by, log=log, taxon_col=taxon_col,
               linear=linear_predictors(list(predictors), linear, y))  # fmt: skip
    out["common_exponents"] = common_exponents_f(d, list(predictors))
    return out


def common_exponents_f(d: Any, predictors: list[str]) -> dict:
    """F = ((RSS_common - RSS_separate) / q) / (RSS_separate / (n - G p)), q = (G - 1)(p - 1):
    the groups of the design's factor fitted separately (p coefficients each) against one set
    of exponents with an intercept per group (:class:`comparo.fitting.multiple.Design`)."""
    from scipy.special import fdtrc

    Xc, _ = d.matrix(predictors)  # common exponents, an intercept per group (treatment coding)
    rss_c = float(np.sum((d.y - Xc @ np.linalg.lstsq(Xc, d.y, rcond=None)[0]) ** 2))
    X1 = np.column_stack([np.ones(len(d.y))] + [d.columns[p] for p in predictors])
    dummies = list(d.dummies.values())
    member = [~np.any(np.array(dummies, dtype=bool), axis=0)] + [m.astype(bool) for m in dummies]
    rss_s = 0.0
    for m in member:
        b = np.linalg.lstsq(X1[m], d.y[m], rcond=None)[0]
        rss_s += float(np.sum((d.y[m] - X1[m] @ b) ** 2))
    n, G, p = len(d.y), len(member), X1.shape[1]
    q, df = (G - 1) * (p - 1), n - G * p
    if df <= 0:
        return {"note": f"too few taxa for the test ({n} taxa, {G} groups of {p} coefficients)"}
    stat = ((rss_c - rss_s) / q) / (rss_s / df) if rss_s > 0 else math.nan
    return {
        "test": "F (common exponents, separate elevations)",
        "statistic": _f(stat),
        "df": [q, df],
        "p": _f(float(fdtrc(q, df, stat))) if math.isfinite(stat) else None,
        "n": n,
    }


def by_lines(res: dict) -> list[str]:
    """The group-wise fits as text."""
    lines = [f"fitted within each group of {res['by']}:"]
    for g in res["groups"]:
        if "error" in g:
            lines.append(f"  {g['group']} ({g['n_rows']} rows): not fitted: {g['error']}")
            continue
        est = ", ".join(
            f"{t['term']} {number(t['estimate'])} [{number(t['ci'][0])}, {number(t['ci'][1])}]"
            for t in g["terms"]
        )
        lines.append(f"  {g['group']} (n = {g['n']}): {est}")
    if res["missing_group"]:
        lines.append(f"  {len(res['missing_group'])} row(s) without a {res['by']}: not fitted")
    c = res["common_exponents"]
    if "note" in c:
        lines.append(c["note"])
    else:
        lines.append(
            f"common exponents across the groups (separate elevations): "
            f"F({c['df'][0]}, {c['df'][1]}) = {number(c['statistic'])}, p = {number(c['p'])}"
        )
    return lines
