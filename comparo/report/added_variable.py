"""Added-variable (partial-regression) plots of a multiple regression: one panel per numeric
predictor, the residuals of y on the other terms against the residuals of that predictor on
the other terms. By the Frisch-Waugh-Lovell theorem the least-squares slope through the origin
of each panel is the predictor's coefficient in the full model, and the panel's residuals are
the full model's (Cook & Weisberg 1982, Residuals and Influence in Regression, ch. 2; Velleman
& Welsch 1981, American Statistician 35: 234-242). For PGLS both are computed on the
phylogenetically whitened regression W y = W X b, W = C(lambda)^(-1/2), where the same holds.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure

    from comparo.fitting.multiple import Design, MultipleFit

_LOG_NAME = {"10": "log10", "e": "ln", "none": ""}


def added_variable_data(d: Design, fit: MultipleFit) -> list[dict]:
    """Per numeric predictor of *fit* on the rows of *d*: ``{"term", "x", "y", "slope",
    "labels", "whitened"}``, x and y the residuals of the predictor and of y on the other
    columns of the design (intercept, other predictors, factor levels) and ``slope`` the
    least-squares slope through the origin (equal to the coefficient). PGLS rows are whitened
    first; raises ValueError when the whitener cannot be built (more taxa than it takes)."""
    X, names = d.matrix(fit.predictors)
    y = d.y
    whitened = fit.method == "pgls"
    if whitened:
        from comparo.fitting.flags import phylo_whitener

        W = phylo_whitener(d.tree, float(fit.lambda_))
        X, y = W @ X, W @ y
    out = []
    for p in fit.predictors:
        j = names.index(p)
        others = np.delete(X, j, axis=1)
        coef_y = np.linalg.lstsq(others, y, rcond=None)[0]
        coef_x = np.linalg.lstsq(others, X[:, j], rcond=None)[0]
        ry, rx = y - others @ coef_y, X[:, j] - others @ coef_x
        sxx = float(rx @ rx)
        out.append(
            {
                "term": p,
                "x": rx,
                "y": ry,
                "slope": float(rx @ ry) / sxx if sxx > 0 else math.nan,
                "labels": list(d.labels),
                "whitened": whitened,
            }
        )
    return out


def _axis(name: str, fit: MultipleFit, labels: Mapping[str, str] | None, whitened: bool) -> str:
    """``residual of log10 Body mass (kg) | others``: the scale, the quantity and its unit."""
    from comparo.base.figure_style import short

    shown = short((labels or {}).get(name, f"{name} (unit as in the table)").split("\n")[0], 44)
    scale = "" if name in fit.linear else _LOG_NAME[fit.log]
    what = "phylogenetically whitened residual" if whitened else "residual"
    return f"{what} of\n{scale + ' ' if scale else ''}{shown}\ngiven the other terms"


def added_variable_plot(
    d: Design,
    fit: MultipleFit,
    *,
    labels: Mapping[str, str] | None = None,
    title: str = "",
) -> Figure:
    """The added-variable plots of *fit* side by side: taxa as points, the line through the
    origin with slope = the coefficient (its value and CI in the legend). *labels* maps a
    column to ``Label (unit)`` for the axes (else ``name (unit as in the table)``)."""
    from comparo.base.figure_style import PALETTE, STYLE, matplotlib_cache

    matplotlib_cache()
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    panels = added_variable_data(d, fit)
    terms = {t["term"]: t for t in fit.terms}
    with plt.rc_context(STYLE):
        fig, axes = plt.subplots(
            1, len(panels), figsize=(4.0 * len(panels) + 0.6, 4.2), layout="constrained"
        )
        for ax, pan in zip(np.atleast_1d(axes), panels, strict=True):
            ax.scatter(pan["x"], pan["y"], s=18, color=PALETTE[0], alpha=0.8, label="taxa")
            lo, hi = float(np.min(pan["x"])), float(np.max(pan["x"]))
            t = terms[pan["term"]]
            ci = t["ci"]
            ax.plot(
                [lo, hi],
                [pan["slope"] * lo, pan["slope"] * hi],
                color=PALETTE[3],
                lw=1.6,
                label=f"slope = coefficient {t['estimate']:.3g}\n"
                f"{100 * fit.ci_level:g}% CI [{ci[0]:.3g}, {ci[1]:.3g}]",
            )
            ax.set_xlabel(_axis(pan["term"], fit, labels, pan["whitened"]))
            ax.set_ylabel(_axis(fit.y, fit, labels, pan["whitened"]))
            ax.legend(frameon=False, loc="best", fontsize=7.5)
        fig.suptitle(
            title or f"Added-variable plots: {fit.y} ~ {' + '.join(fit.predictors)}", fontsize=10
        )
    return fig


def comparison_figure(
    table: Any,
    comparison: Any,
    *,
    tree: Any = None,
    tree_labels: Mapping[str, str] | None = None,
    labels: Mapping[str, str] | None = None,
) -> tuple[Figure, str] | None:
    """The added-variable plots of the best-supported model with two or more predictors of a
    :class:`comparo.fitting.comparison.Comparison`, refitted on the comparison's taxa, and a
    caption; None when no model has two predictors. A PGLS on more taxa than the whitener
    takes returns None as well (the caption of the section says nothing was drawn)."""
    from comparo.fitting.multiple import design, fit_design, linear_predictors

    chosen = next((f for f in comparison.fits if len(f.predictors) >= 2), None)
    if chosen is None:
        return None
    cols = list(dict.fromkeys(c for f in comparison.fits for c in f.predictors))
    d = design(
        table, comparison.y, cols, factor=comparison.factor, log=comparison.log,
        tree=tree if comparison.method == "pgls" else None, tree_labels=tree_labels,
        linear=linear_predictors(
            cols, sorted({c for f in comparison.fits for c in f.linear}), comparison.y
        ),
    )  # fmt: skip
    lam = chosen.lambda_ if chosen.lambda_ is not None else "ml"
    fit = fit_design(d, comparison.y, chosen.predictors, method=comparison.method, lambda_=lam,
                     ci=chosen.ci_level, log=comparison.log)  # fmt: skip
    try:
        fig = added_variable_plot(d, fit, labels=labels)
    except ValueError:
        return None
    rank = comparison.fits.index(chosen) + 1
    weight = comparison.weights[rank - 1]
    caption = (
        f"Added-variable plots of {' + '.join(fit.predictors)} (rank {rank} by AICc, Akaike "
        f"weight {weight:.3g}, the best-supported model with two or more predictors), on the "
        f"{fit.n} taxa of the comparison. Each panel: the residuals of y on the other terms "
        "against the residuals of that predictor on the other terms; the slope of the line is "
        "the predictor's coefficient in the full model, and the spread about it is what that "
        "coefficient rests on"
        + (
            "; PGLS: both residuals phylogenetically whitened at the fitted Pagel's lambda"
            if fit.method == "pgls"
            else ""
        )
        + "."
    )
    return fig, caption
