"""The scaling figure of one fit (log-log points by basis and group, the fitted line, its
bootstrap band and the group lines), drawn by :meth:`comparo.fitting.FitResult.plot` and by
the report (:mod:`comparo.report.figures`), in the house style of
:mod:`comparo.base.figure_style`.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.figure_style import (
    BASIS_FILL,
    BASIS_ORDER,
    PALETTE,
    STYLE,
    axis_label,
    label_points,
    matplotlib_cache,
    new_figure,
    plain_log_ticks,
    short,
    short_number,
    weakest_basis,
)

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd
    from matplotlib.figure import Figure

__all__ = [
    "STYLE",
    "draw_scaling",
    "inverse",
    "line_band",
    "matplotlib_cache",
    "scaling_plot",
    "weakest_basis",
]


def inverse(log: str):
    """The inverse of the axis transform *log* (``"10"``, ``"e"`` or ``"none"``) as a function
    (:func:`comparo.base.scales.from_scale`, the one log transform)."""
    from comparo.base.scales import from_scale

    return lambda v: from_scale(v, log)


def line_band(
    X: np.ndarray,
    Y: np.ndarray,
    method: str,
    grid: np.ndarray,
    *,
    ci: float = 0.95,
    resamples: int = 999,
    seed: int = 20240601,
) -> tuple[np.ndarray, np.ndarray] | None:
    """Pointwise percentile band of a bootstrapped OLS, SMA or MA line on the fitted scale.

    Pairs (X, Y) are resampled with replacement (``numpy.random.default_rng(seed)``,
    vectorised); each resample's line passes through its means with the slope of
    :func:`comparo.fitting.slope_from_moments`. Returns (low, high) at *grid*, or None
    for other methods (no band is drawn for them).
    """
    from comparo.fitting.core import slope_from_moments

    if method not in ("ols", "sma", "ma") or len(X) < 3:
        return None
    rng = np.random.default_rng(seed)
    idx = rng.integers(0, len(X), size=(resamples, len(X)))
    xs, ys = X[idx], Y[idx]
    mx, my = xs.mean(axis=1), ys.mean(axis=1)
    dx, dy = xs - mx[:, None], ys - my[:, None]
    b = slope_from_moments(method, (dx * dx).sum(1), (dy * dy).sum(1), (dx * dy).sum(1))
    ok = np.isfinite(b)
    lines = my[ok, None] + b[ok, None] * (grid[None, :] - mx[ok, None])
    a = (1 - ci) / 2
    return np.quantile(lines, a, axis=0), np.quantile(lines, 1 - a, axis=0)


def scaling_plot(
    fit: Any,
    points: pd.DataFrame,
    *,
    catalog: Mapping[str, Any] | None = None,
    by: str | None = None,
    seed: int = 20240601,
    title: str | None = None,
) -> Figure:
    """Log-log scaling plot of one fit on a new figure (see :func:`draw_scaling`)."""
    fig, ax = new_figure(9.2, 4.6)
    draw_scaling(ax, fit, points, catalog=catalog, by=by, seed=seed, title=title)
    return fig


def _legend_entries(ax: Any, points: pd.DataFrame, groups: list, colour: dict) -> tuple:
    """The axes' legend entries, then one per point colour (each group, with or without a
    line of its own) and one per marker fill (basis) present."""
    from matplotlib.lines import Line2D

    handles, labels = ax.get_legend_handles_labels()
    for g in groups:
        handles.append(Line2D([], [], ls="", marker="o", color=colour[g]))
        k = len(points) if g is None else int((points["group"] == g).sum())
        labels.append(f"{'taxa' if g is None else g} (n = {k})")
    for basis in dict.fromkeys(points["basis"]):
        if basis in BASIS_FILL:
            handles.append(
                Line2D([], [], ls="", marker="o", color="#555555", fillstyle=BASIS_FILL[basis])
            )
            labels.append(f"basis: {basis}")
    return handles, labels


def draw_scaling(
    ax: Any,
    fit: Any,
    points: pd.DataFrame,
    *,
    catalog: Mapping[str, Any] | None = None,
    by: str | None = None,
    seed: int = 20240601,
    title: str | None = None,
) -> Any:
    """Draw the log-log scaling plot of one fit on the matplotlib Axes *ax*; returns *ax*.

    Parameters
    ----------
    fit : comparo.fitting.FitResult
    points : DataFrame
        The plotted points: ``label``, ``x_fit``, ``y_fit`` (fitted scale),
        ``basis`` (weakest basis of x and y; without it every point is drawn
        filled and the legend names no basis) and, with *by*, ``group``.
    catalog : quantity catalogue, for axis labels with units.
    by : grouping column name (per-group lines in group colours).
    seed : seed of the bootstrap band (:func:`line_band`).

    Notes
    -----
    The line is y = 10^a x^b (log 10) drawn on the data scale; the band is the
    pointwise bootstrap interval of the overall line at the fit's CI level.
    Flagged points (``fit.outliers``) are labelled.
    """
    if "basis" not in points:
        points = points.assign(basis="")
    inv = inverse(fit.log)
    groups = list(dict.fromkeys(points["group"])) if by and "group" in points else [None]
    colour = {g: PALETTE[i % len(PALETTE)] for i, g in enumerate(groups)}
    for g in groups:
        part = points if g is None else points[points["group"] == g]
        for basis in ("", *BASIS_ORDER):
            sel = part[part["basis"] == basis]
            if len(sel):
                ax.plot(
                    inv(sel["x_fit"].to_numpy()),
                    inv(sel["y_fit"].to_numpy()),
                    ls="",
                    marker="o",
                    color=colour[g],
                    fillstyle=BASIS_FILL.get(basis, "full"),
                    markeredgewidth=1.0,
                )
    X, Y = points["x_fit"].to_numpy(float), points["y_fit"].to_numpy(float)
    grid = np.linspace(X.min(), X.max(), 120)
    pct = f"{100 * fit.ci_level:g}%"
    lo, hi = fit.slope_ci
    differ = bool(getattr(fit, "group_tests", None) and fit.group_tests.get("slopes_differ"))
    who = "all taxa pooled (the groups differ in slope)" if differ else "all"
    eq = (
        f"{who}: b = {short_number(fit.slope)} "
        f"({pct} CI {short_number(lo)} to {short_number(hi)}), "
        f"a = {short_number(fit.intercept)}"
    )
    if fit.lambda_ is not None:
        eq += f", λ = {short_number(fit.lambda_)}"
    ax.plot(inv(grid), inv(fit.intercept + fit.slope * grid), color="#000000", lw=1.6, label=eq)
    band = line_band(X, Y, fit.method, grid, ci=fit.ci_level, seed=seed)
    if band is not None:
        ax.fill_between(
            inv(grid),
            inv(band[0]),
            inv(band[1]),
            color="#000000",
            alpha=0.12,
            lw=0,
            label=f"{pct} bootstrap band of the line",
        )
    for gr in fit.groups or []:
        g = gr["group"]
        if g not in colour or gr.get("slope") is None:
            continue
        gx = points.loc[points["group"] == g, "x_fit"].to_numpy(float)
        gg = np.linspace(gx.min(), gx.max(), 40)
        glo, ghi = gr.get("slope_ci") or (None, None)
        ax.plot(
            inv(gg),
            inv(gr["intercept"] + gr["slope"] * gg),
            color=colour[g],
            lw=1.2,
            ls="--",
            label=(
                f"{g}: b = {short_number(gr['slope'])} ({short_number(glo)} to {short_number(ghi)})"
            ),
        )
    handles, labels = _legend_entries(ax, points, groups, colour)
    if fit.log != "none":
        ax.set_xscale("log")
        ax.set_yscale("log")
    ax.set_xlabel(axis_label(fit.x, catalog, getattr(fit, "temperature", None)))
    ax.set_ylabel(axis_label(fit.y, catalog, getattr(fit, "temperature", None)))
    ax.set_title(
        title or f"{fit.method.upper()}: {fit.y} against {fit.x} (n = {fit.n})", loc="left"
    )
    plain_log_ticks(ax)
    flagged = {o["label"] for o in fit.outliers}
    sel = points[points["label"].isin(flagged)]
    if len(sel):
        label_points(
            ax,
            inv(sel["x_fit"].to_numpy(float)),
            inv(sel["y_fit"].to_numpy(float)),
            [short(v) for v in sel["label"]],
        )
    ax.legend(handles, labels, loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False)
    return ax
