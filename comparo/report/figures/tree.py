"""The phylogeny with a trait mapped at its tips (a rectangular drawing with branch lengths)."""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.figure_style import (
    new_figure,
    short,
)

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure

TREE_LABEL_LIMIT = 300
#: Colour map of a trait on the tree: cividis, designed to read the same with and without
#: colour-vision deficiency (Nuñez, Anderton & Renslow 2018, PLoS ONE 13: e0199239).
TRAIT_CMAP = "cividis"


def tree_layout(tree: Any) -> dict[str, np.ndarray | tuple[str, ...]]:
    """Coordinates of a rectangular drawing of *tree* (a dendropy tree or Newick text/file).

    Returns a dict with ``tips`` (tip labels, top to bottom in the tree's own child
    order), ``segments`` (array (k, 2, 2) of line segments: one horizontal segment per
    edge, one vertical connector per internal node), ``tip_x`` (root-to-tip distance,
    branch-length units of the tree) and ``tip_y`` (row 0, 1, ... from the top).
    An internal node sits half-way between its outermost children. Linear in the
    number of nodes (one pass per level of :func:`comparo.phylo.flat_tree`).
    """
    from comparo.phylo import flat_tree

    ft = flat_tree(tree)
    n, m = ft.n_tips, ft.n_nodes
    rank = np.empty(n, dtype=np.int64)
    rank[np.argsort(ft.order[:n], kind="stable")] = np.arange(n)
    y = np.zeros(m)
    y[:n] = rank
    lo, hi = np.full(m, np.inf), np.full(m, -np.inf)
    bounds = ft.bounds
    for k in range(len(bounds) - 1):
        sl = np.arange(bounds[k], bounds[k + 1])
        if k > 0:
            y[sl] = (lo[sl] + hi[sl]) / 2
        ch = sl[ft.parent[sl] >= 0]
        np.minimum.at(lo, ft.parent[ch], y[ch])
        np.maximum.at(hi, ft.parent[ch], y[ch])
    x = ft.root_dist
    child = np.flatnonzero(ft.parent >= 0)
    horiz = np.stack(
        [np.column_stack([x[ft.parent[child]], y[child]]), np.column_stack([x[child], y[child]])],
        axis=1,
    )
    inner = np.arange(n, m)
    vert = np.stack(
        [np.column_stack([x[inner], lo[inner]]), np.column_stack([x[inner], hi[inner]])], axis=1
    )
    order = np.argsort(rank)
    return {
        "tips": tuple(ft.tips[i] for i in order),
        "segments": np.concatenate([horiz, vert]),
        "tip_x": x[:n][order],
        "tip_y": rank[order].astype(float),
    }


def _colour_bar(fig: Any, ax: Any, sc: Any, label: str, log: bool, lo: float, hi: float) -> None:
    """The colour bar of the trait tiles under the tree; on a log scale its ticks are plain
    numbers, minor ticks named at 2 and 5 when the values span more than a factor 10."""
    cb = fig.colorbar(sc, ax=ax, location="bottom", shrink=0.7, aspect=30, pad=0.01)
    cb.set_label(label + (", log scale" if log else ""))
    if log:
        from matplotlib.ticker import FuncFormatter

        cb.ax.xaxis.set_major_formatter(FuncFormatter(lambda t, _: f"{t:g}"))
        wide = hi / lo > 10
        cb.ax.xaxis.set_minor_formatter(
            FuncFormatter(
                lambda t, _: (
                    f"{t:g}"
                    if not wide or round(t / 10 ** np.floor(np.log10(t) + 1e-9)) in (2, 5)
                    else ""
                )
            )
        )


def tree_trait(
    tree: Any,
    values: Mapping[str, float],
    *,
    label: str,
    names: Mapping[str, str] | None = None,
    log: bool = True,
    title: str = "",
    max_labels: int = TREE_LABEL_LIMIT,
) -> Figure:
    """The phylogeny with a trait mapped as a coloured tile beside each tip.

    Parameters
    ----------
    tree : dendropy.Tree, or Newick text or file name
        Drawn with branch lengths; the horizontal axis is the distance from the root
        in the tree's branch-length units.
    values : mapping tip label -> trait value
        In the units named by *label*. Tips without a (positive, with *log*) finite
        value get an open grey tile, listed in the legend as "no value".
    label : str
        Colour-bar label with the unit, e.g. ``"Observed frequency (Hz)"``.
    names : mapping tip label -> name shown, optional
        E.g. the table's taxon name; default the tip label with ``_`` as spaces.
    log : bool
        Logarithmic colour scale (the scale of a log-log fit).
    max_labels : int
        Above this many tips no tip labels are drawn (:data:`TREE_LABEL_LIMIT`).

    Notes
    -----
    Colours: :data:`TRAIT_CMAP`. The tiles carry ``gid="trait-tiles"`` (with a value)
    and ``gid="no-value-tiles"`` (without), the branches ``gid="branches"``.
    """
    from matplotlib.collections import LineCollection
    from matplotlib.colors import LogNorm, Normalize

    lay = tree_layout(tree)
    tips = lay["tips"]
    n = len(tips)
    labelled = n <= max_labels
    height = min(19.0, max(3.6, 0.135 * n + 1.8)) if labelled else 8.0
    fig, ax = new_figure(8.0, height)
    ax.grid(False)
    ax.add_collection(
        LineCollection(
            lay["segments"], colors="#333333", linewidths=0.9 if n <= 500 else 0.5, gid="branches"
        )
    )
    xmax = float(np.max(lay["tip_x"])) if n else 1.0
    xmax = xmax if xmax > 0 else 1.0
    col = xmax * 1.04
    v = np.array(
        [float(values[t]) if t in values and values[t] is not None else np.nan for t in tips],
        dtype=float,
    )
    ok = np.isfinite(v) & ((v > 0) if log else True)
    ty = lay["tip_y"]
    gap = lay["tip_x"] < col * 0.999
    if labelled and gap.any():
        ax.hlines(ty[gap], lay["tip_x"][gap], col, colors="#BBBBBB", linewidths=0.5, linestyles=":")
    row_pt = (height - 1.6) * 72 / max(n, 1)
    size = max(1.0, 0.8 * row_pt) ** 2
    if ok.any():
        lo, hi = float(v[ok].min()), float(v[ok].max())
        if lo == hi:
            lo, hi = (lo / 1.5, hi * 1.5) if log else (lo - 0.5, hi + 0.5)
        norm = LogNorm(lo, hi) if log else Normalize(lo, hi)
        sc = ax.scatter(
            np.full(ok.sum(), col),
            ty[ok],
            c=v[ok],
            cmap=TRAIT_CMAP,
            norm=norm,
            marker="s",
            s=size,
            edgecolors="none",
            gid="trait-tiles",
            zorder=3,
        )
        _colour_bar(fig, ax, sc, label, log, lo, hi)
    if (~ok).any():
        ax.scatter(
            np.full((~ok).sum(), col),
            ty[~ok],
            marker="s",
            s=size,
            facecolors="none",
            edgecolors="#888888",
            linewidths=0.7,
            gid="no-value-tiles",
            zorder=3,
        )
    ax.set_xlim(-0.01 * xmax, col * 1.03)
    ax.set_ylim(n - 0.5, -0.5)
    ax.spines["left"].set_visible(False)
    ax.yaxis.tick_right()
    if labelled:
        shown = [(names or {}).get(t) or t.replace("_", " ") for t in tips]
        ax.set_yticks(ty, [short(v) for v in shown], fontsize=min(8.0, max(3.0, 0.8 * row_pt)))
        ax.yaxis.set_label_position("right")
        ax.set_ylabel("tip (taxon)")
        ax.tick_params(axis="y", length=0, pad=2 + 0.3 * np.sqrt(size))
    else:
        ax.set_yticks([])
    ax.set_xlabel("distance from the root (branch-length units of the tree)")
    missing = f"; open tile: no value ({int((~ok).sum())})" if (~ok).any() else ""
    ax.set_title(
        f"{title or 'Phylogeny with the trait at the tips'}\n"
        f"({n} tips, {int(ok.sum())} with a value{missing}"
        + ("" if labelled else f"; no tip labels above {max_labels} tips")
        + ")"
    )
    return fig
