"""Figures of the report (matplotlib, Agg backend): the scaling plot of each fit, its residual
diagnostics, the profile likelihood of lambda, the leave-one-source-out forest, the phylogeny
with a trait, the regime picture, coverage, source contributions and trace loops.

Every figure function takes result objects or DataFrames and returns a
:class:`matplotlib.figure.Figure`; :func:`render` turns a figure into PNG and SVG bytes
that are identical from run to run, and :func:`render_later` does the same in a forked
process while the caller goes on (the report draws its figures this way on a machine with
more than one core).

Modules: the house style is :mod:`comparo.base.figure_style`, the scaling figure of one fit
:mod:`comparo.fitting.plot`; here :mod:`.fits` (diagnostics, lambda profile, forest),
:mod:`.tree` (phylogeny with a trait), :mod:`.overview` (regime, coverage, sources, loops)
and :mod:`.rendering` (rendering in forked processes).
"""

from __future__ import annotations

from comparo.base.figure_style import (
    BASIS_COLOURS,
    BASIS_FILL,
    BASIS_ORDER,
    PALETTE,
    STYLE,
    axis_label,
    label_points,
    matplotlib_cache,
    new_figure,
    plain_log_ticks,
    pyplot,
    render,
    short,
    short_number,
    weakest_basis,
)
from comparo.fitting.plot import draw_scaling, line_band, scaling_plot
from comparo.report.figures.fits import (
    DIAGNOSTIC_LABELS,
    RESIDUAL_NAMES,
    diagnostics,
    forest_plot,
    lambda_profile,
)
from comparo.report.figures.overview import coverage_map, loop_plot, regime_plot, source_chart
from comparo.report.figures.rendering import finish_renders, render_later
from comparo.report.figures.tree import TRAIT_CMAP, TREE_LABEL_LIMIT, tree_layout, tree_trait

_plt = pyplot  # the name older callers use

__all__ = [
    "BASIS_COLOURS",
    "BASIS_FILL",
    "BASIS_ORDER",
    "DIAGNOSTIC_LABELS",
    "PALETTE",
    "RESIDUAL_NAMES",
    "STYLE",
    "TRAIT_CMAP",
    "TREE_LABEL_LIMIT",
    "axis_label",
    "coverage_map",
    "diagnostics",
    "draw_scaling",
    "finish_renders",
    "forest_plot",
    "label_points",
    "lambda_profile",
    "line_band",
    "loop_plot",
    "matplotlib_cache",
    "new_figure",
    "plain_log_ticks",
    "pyplot",
    "regime_plot",
    "render",
    "render_later",
    "scaling_plot",
    "short",
    "short_number",
    "source_chart",
    "tree_layout",
    "tree_trait",
    "weakest_basis",
]
