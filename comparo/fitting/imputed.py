"""A scaling fit with phylogenetically imputed values, by multiple imputation: m completed
tables (each imputed taxon drawn jointly from its predictive distribution), each fitted by
the chosen method, slope and intercept combined by Rubin's rules, compared with the fit
on the observed taxa alone (which is reported unchanged).

Rubin DB (1987) Multiple imputation for nonresponse in surveys. Wiley, New York.
Barnard J, Rubin DB (1999) Small-sample degrees of freedom with multiple imputation.
Biometrika 86:948-955.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from comparo.base.errors import UsageError

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from comparo.fitting.result import FitResult


@dataclass(frozen=True, eq=False)
class ImputedFit:
    """The fit on observed taxa (``fit``, as ``comparo fit`` gives it) and the multiple-
    imputation block (``imputation``, the JSON's ``"imputation"``)."""

    fit: FitResult
    imputation: dict

    def to_dict(self) -> dict:
        """The fit's JSON with ``"imputation"`` added (its other keys unchanged)."""
        d = self.fit.to_dict()
        d["imputation"] = self.imputation
        return d

    def to_frame(self) -> pd.DataFrame:
        return self.fit.to_frame()

    def summary(self) -> str:
        b = self.imputation
        pct = f"{100 * self.fit.ci_level:g}%"
        lo, hi = b["slope_ci"]
        lines = [
            self.fit.summary(),
            "",
            f"with imputed taxa (multiple imputation, m = {b['m']} draws, Rubin's rules, "
            f"df by {b['df_rule']}):",
            f"  quantities imputed: {', '.join(b['quantities'])}"
            + (f" (with {', '.join(b['with'])})" if b["with"] else ""),
            f"  {b['n_imputed']} taxa with imputed values enter the fit: n = {b['n']} "
            f"(without them n = {b['n_without_imputed']})",
            f"  slope {b['slope']:.4g} (SE {b['slope_se']:.3g}, {pct} CI [{lo:.4g}, {hi:.4g}], "
            f"df {b['df']:.3g}) against {b['slope_without_imputed']:.4g} without imputed taxa",
            f"  share of the slope's variance due to imputation: "
            f"{100 * b['missing_information']:.1f}%",
        ]
        for q, cv in b["cross_validation"].items():
            lines.append(
                f"  {q}: leave-one-out RMSE {cv['rmse_log']:.3g} log10 units, "
                f"{100 * cv['coverage']:.1f}% inside the 95% intervals"
            )
        lines.append("  imputed values are predictions from relatives, not measurements")
        return "\n".join(lines)


def _estimate_and_variance(f: FitResult, term: int) -> tuple[float, float]:
    """Estimate and squared SE of the intercept (0) or slope (1): the method's SE, or for
    methods whose intervals are not estimate ± t·SE (sma, ma) the CI half-width over the
    t quantile on n − 2 df (an approximate SE)."""
    from scipy.stats import t

    row = f.terms()[term]
    est = float(row["estimate"])
    if row["se"] is not None:
        return est, float(row["se"]) ** 2
    lo, hi = row["ci"]
    q = float(t.ppf(0.5 + f.ci_level / 2.0, max(f.n - 2, 1)))
    return est, ((float(hi) - float(lo)) / (2.0 * q)) ** 2


def _completed(table: pd.DataFrame, taxon_col: str, fills: dict[str, tuple[list, Any]], k: int):
    """*table* with each quantity's imputed taxa set to their k-th draw (10^log10 value);
    taxa absent from the table are added as rows."""
    import numpy as np
    import pandas as pd

    out = table.copy()
    names = set(out[taxon_col].astype(str))
    new = sorted({t for taxa, _ in fills.values() for t in taxa} - names)
    if new:
        out = pd.concat([out, pd.DataFrame({taxon_col: new})], ignore_index=True)
    pos = {t: i for i, t in enumerate(out[taxon_col].astype(str))}
    for q, (taxa, draws) in fills.items():
        if q not in out:
            out[q] = np.nan
        rows = [pos[t] for t in taxa]
        out.loc[out.index[rows], q] = 10.0 ** draws[k]
    return out


def _n_imputed_points(table: Any, done: Any, x: str, y: str, taxon_col: str) -> int:
    """Fitted taxa with an imputed value: rows of the completed table with x and y where
    the observed table lacks one of them."""
    import numpy as np

    obs_tab = table.set_index(table[taxon_col].astype(str))
    both = done[np.isfinite(done[x].astype(float)) & np.isfinite(done[y].astype(float))]
    n_imp = 0
    for t in both[taxon_col].astype(str):
        row = obs_tab.loc[t] if t in obs_tab.index else None
        ok = row is not None and all(
            q in obs_tab.columns and math.isfinite(float(row[q])) for q in (x, y)
        )
        n_imp += 0 if ok else 1
    return n_imp


def _draw_fills(dataset, table, x, y, qs, with_, lambda_, m, seed, taxon_col):
    """Per quantity imputed: (taxa, m x taxa draws of log10 values) and its
    cross-validation; each imputed with the other variable of the fit as a correlated
    trait, and only at taxa whose other variable is observed."""
    import numpy as np

    from comparo.phylo.completion import predictive_draws
    from comparo.phylo.imputation import impute

    fills, cv = {}, {}
    has = {
        q: set(table.loc[np.isfinite(table[q].astype(float)), taxon_col].astype(str))
        if q in table
        else set()
        for q in (x, y)
    }
    for j, q in enumerate(qs):
        other = y if q == x else x
        # the other variable of the fit is always a correlated trait of the imputation
        # (a congenial imputation model: imputing y without x would flatten the slope)
        withs = list(dict.fromkeys([w for w in with_ if w != q] + [other]))
        imp = impute(dataset, q, lambda_=lambda_, with_=withs)
        cols = [i for i, o in enumerate(imp.observed) if not o]
        keep = [i for i, c in enumerate(cols) if imp.taxa[c] in has[other]]
        draws = predictive_draws(imp, m, seed + j)[:, keep]
        fills[q] = ([imp.taxa[cols[i]] for i in keep], draws)
        cv[q] = {
            "rmse_log": imp.rmse_log,
            "coverage": imp.coverage,
            "lambda": imp.lambda_,
            "with": withs,
        }
    return fills, cv


def fit_with_imputation(
    dataset: Any,
    table: pd.DataFrame,
    x: str,
    y: str,
    method: str = "sma",
    *,
    quantities: list[str] | None = None,
    with_: list[str] | tuple[str, ...] = (),
    lambda_: Any = "ml",
    m: int = 20,
    seed: int = 20261205,
    taxon_col: str = "taxon",
    **fit_options: Any,
) -> ImputedFit:
    """:func:`comparo.fitting.fit` on the observed taxa, and the same fit with the imputed
    taxa by multiple imputation.

    Parameters
    ----------
    dataset : Dataset
        The loaded dataset (its tree and catalogue); *table* is its per-taxon table.
    quantities : list of str, optional
        Quantities to impute (default: x and y); only x and y matter to the fit. A taxon
        enters with an imputed x only when its y is observed, and the other way round
        (a taxon with neither stays out); each is imputed with the other variable of the
        fit among its correlated traits (multivariate BM), so that the imputation model
        holds the relation the fit estimates.
    with_, lambda_ :
        As :func:`comparo.phylo.imputation.impute`.
    m : int
        Completed tables (>= 2). Each imputed taxon's values are drawn jointly from the
        predictive distribution (:meth:`Imputation.draws`, seeded by *seed*).
    **fit_options
        Passed to every fit (method options, ``ci``, ``log``, PGLS tree...). Bootstrap,
        broken line and refits without flagged points apply to the observed-taxa fit only.

    Returns
    -------
    ImputedFit
        ``imputation``: ``m``, ``seed``, ``quantities``, ``with``, ``lambda``,
        ``n_imputed`` (fitted taxa with an imputed value), ``n``, ``n_without_imputed``,
        ``slope_without_imputed``, ``slope``, ``slope_se``, ``slope_ci``, ``df``,
        ``df_rule``, ``intercept``, ``intercept_se``, ``relative_increase``,
        ``missing_information`` (of the slope), ``n_imputed_by_quantity`` and
        ``cross_validation`` per quantity.
    """
    import numpy as np

    from comparo.fitting.pooling import rubin_pool
    from comparo.fitting.scaling import fit

    if m < 2:
        raise UsageError(f"multiple imputation needs m >= 2 draws (got {m})")
    base = fit(table, x, y, method, taxon_col=taxon_col, **fit_options)
    asked = list(dict.fromkeys(quantities or [x, y]))
    qs = [q for q in asked if q in (x, y)]
    if not qs:
        raise UsageError(
            f"the quantities to impute ({', '.join(asked)}) include neither {x} nor {y}"
        )
    fills, cv = _draw_fills(dataset, table, x, y, qs, with_, lambda_, m, seed, taxon_col)
    by_q: dict[str, int] = {}
    light = {
        k: v for k, v in fit_options.items() if k not in ("bootstrap", "breakpoint", "drop_flagged")
    }
    slopes, intercepts, ns = [], [], []
    for k in range(m):
        done = _completed(table, taxon_col, fills, k)
        f = fit(done, x, y, method, taxon_col=taxon_col, **light)
        slopes.append(_estimate_and_variance(f, 1))
        intercepts.append(_estimate_and_variance(f, 0))
        ns.append(f.n)
    n_imp = _n_imputed_points(table, _completed(table, taxon_col, fills, 0), x, y, taxon_col)
    for q, (taxa, _) in fills.items():
        by_q[q] = len(taxa)
    df_c = float(np.median(ns)) - 2
    ps = rubin_pool([s[0] for s in slopes], [s[1] for s in slopes], df_complete=df_c)
    pi = rubin_pool([s[0] for s in intercepts], [s[1] for s in intercepts], df_complete=df_c)
    level = float(fit_options.get("ci", 0.95))
    block = {
        "m": m,
        "seed": seed,
        "quantities": qs,
        "with": [w for w in with_],
        "lambda": lambda_ if isinstance(lambda_, str) else float(lambda_),
        "n_imputed": n_imp,
        "n": int(round(float(np.median(ns)))),
        "n_without_imputed": base.n,
        "slope_without_imputed": base.slope,
        "slope_ci_without_imputed": list(base.slope_ci),
        "slope": ps.estimate,
        "slope_se": ps.se,
        "slope_ci": list(ps.ci(level)),
        "df": ps.df,
        "df_rule": ps.df_rule,
        "intercept": pi.estimate,
        "intercept_se": pi.se,
        "relative_increase": ps.relative_increase,
        "missing_information": ps.missing_information,
        "n_imputed_by_quantity": by_q,
        "cross_validation": cv,
    }
    return ImputedFit(base, block)
