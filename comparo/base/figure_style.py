"""The house style of comparo's figures: colours, marker fills by basis, rcParams, the Agg
pyplot, axis labels with units, point labels, plain log ticks, and PNG/SVG bytes that are
identical from run to run (fixed SVG hash salt, no date or software stamp in the metadata).

Used by the scaling figure of a fit (:mod:`comparo.fitting.plot`) and by the report's figures
(:mod:`comparo.report.figures`); it imports only :mod:`comparo.base`.

Colours are the eight-colour palette for colour-blind readers of Okabe and Ito
(2002, "Color Universal Design", J*FLY). Marker fill shows the weakest basis of
a point: filled = reported, left half filled = digitized, lower half filled =
computed, open = proxy or assumed.

References
----------
Okabe M, Ito K (2002). Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people. J*FLY Data Depository.
"""

from __future__ import annotations

import io
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure

#: Okabe-Ito colours (black first; yellow last, it is faint on white).
PALETTE = ("#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#000000", "#F0E442")
#: Basis -> colour of the coverage map (strong to weak: dark blue to vermillion; missing is white).
BASIS_COLOURS = {
    "reported": "#0072B2",
    "computed": "#56B4E9",
    "digitized": "#009E73",
    "proxy": "#E69F00",
    "assumed": "#D55E00",
    "": "#FFFFFF",
}
#: Basis -> marker fill style of a point.
BASIS_FILL = {
    "reported": "full",
    "computed": "bottom",
    "digitized": "left",
    "proxy": "none",
    "assumed": "none",
}
BASIS_ORDER = ("reported", "computed", "digitized", "proxy", "assumed")

STYLE = {  # the house style of every figure
    "font.size": 9.5,
    "axes.titlesize": 10.5,
    "axes.labelsize": 9.5,
    "legend.fontsize": 8,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": "#DDDDDD",
    "grid.linewidth": 0.6,
    "axes.axisbelow": True,
    "figure.dpi": 100,
    "savefig.dpi": 150,
    "svg.hashsalt": "comparo",
    "svg.fonttype": "path",
    "lines.markersize": 5.5,
    "font.family": "DejaVu Sans",
}


def matplotlib_cache() -> None:
    """Point matplotlib's configuration and font cache at comparo's cache folder
    (``$COMPARO_CACHE_DIR/matplotlib``, else ``~/.cache/comparo/matplotlib`` on Linux), or at a
    temporary folder removed at exit when ``COMPARO_CACHE_DIR`` is empty, so that comparo
    writes nothing under ``~/.matplotlib`` or ``~/.config``. Only when ``MPLCONFIGDIR`` is unset
    and matplotlib is not yet imported (a session's own matplotlib set-up is left alone)."""
    import os
    import sys

    if "MPLCONFIGDIR" in os.environ or "matplotlib" in sys.modules:
        return
    from comparo.base.units import cache_base

    base = cache_base()
    if base is None:
        import atexit
        import shutil
        import tempfile

        folder = tempfile.mkdtemp(prefix="comparo-matplotlib-")
        atexit.register(shutil.rmtree, folder, ignore_errors=True)
    else:
        folder = str(base / "matplotlib")
    os.environ["MPLCONFIGDIR"] = folder


def pyplot():
    """``matplotlib.pyplot`` on the Agg backend, its cache folder set (:func:`matplotlib_cache`)."""
    matplotlib_cache()
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def new_figure(w: float = 6.4, h: float = 4.4, ncols: int = 1):
    """A new figure *w* x *h* inches with *ncols* axes in the house style (constrained layout);
    returns ``(figure, axes)``."""
    plt = pyplot()
    with plt.rc_context(STYLE):
        fig, axes = plt.subplots(1, ncols, figsize=(w, h), layout="constrained")
    return fig, axes


def short(label: object, limit: int = 40) -> str:
    """*label* as text, cut to *limit* characters with an ellipsis (long names would crush
    the axes)."""
    text = str(label)
    return text if len(text) <= limit else text[: limit - 1] + "\u2026"


def render(fig: Figure) -> tuple[bytes, bytes]:
    """PNG and SVG bytes of *fig*, byte-identical across runs; the figure is closed."""
    plt = pyplot()
    with plt.rc_context(STYLE):
        png, svg = io.BytesIO(), io.BytesIO()
        fig.savefig(png, format="png", metadata={"Software": None})
        # the layout found for the PNG holds for the SVG (same size in inches): skip a second solve
        fig.set_layout_engine("none")
        fig.savefig(svg, format="svg", metadata={"Date": None, "Creator": None})
    plt.close(fig)
    return png.getvalue(), svg.getvalue()


def axis_label(
    key: str, catalog: Mapping[str, Any] | None, temperature: Mapping[str, Any] | None = None
) -> str:
    """``Label (unit)`` from the catalogue, else from the derived keys (schema/derived.toml);
    a column of a plain table (no catalogue) is named as it is, ``(unit as in the table)``.

    With *temperature* (a fit's ``temperature``,
    :func:`comparo.validation.temperature.fit_temperature`), a temperature-sensitive quantity
    says the temperature its values refer to: ``at 25 °C``, ``at operating temperature`` or
    ``at measured temperature`` (normalisation off), and when endotherms (or heterotherms at
    their operating temperature) kept in-vivo values as measured, that those are at body
    temperature."""
    from comparo.base.units import pretty

    q = catalog.get(key) if catalog is not None else None
    if q is not None:
        label, unit = q.label, pretty(q.unit)
    else:
        from comparo.base.catalog import read_schema

        spec = read_schema("derived.toml")["keys"].get(key) if catalog is not None else None
        if spec is None or spec.get("unit") is None:
            return f"{key} (unit as in the table)"
        label, unit = spec.get("label", key), pretty(spec["unit"])
    text = f"{label} ({'dimensionless' if unit in ('1', 'dimensionless') else unit})"
    if temperature and q is not None and q.temperature_sensitive:
        to = temperature.get("to")
        text += " at measured temperature" if to == "off" else f" at {to}"
        if to != "off" and temperature.get("kept_as_measured"):
            text += "\n(endotherms in vivo: at body temperature)"
    return text


def weakest_basis(*bases: str) -> str:
    """The weakest of the given bases (order reported < computed < digitized < proxy < assumed)."""
    rank = {b: i for i, b in enumerate(BASIS_ORDER)}
    known = [b for b in bases if b in rank]
    return max(known, key=rank.__getitem__) if known else ""


def label_points(
    ax: Any,
    xs: Sequence[float],
    ys: Sequence[float],
    texts: Sequence[str],
    *,
    fontsize: float = 7.0,
    gids: Sequence[str] | None = None,
    color: str = "#333333",
) -> None:
    """Name points beside them without two names overlapping.

    Greedy, in display units: each name starts 4 points up and right of its point and moves
    down a line at a time while its box (width estimated at 0.6 em per character) would
    overlap a name already placed. Call after the axes' scales are set.
    """
    ax.autoscale_view()
    pts = ax.transData.transform(np.column_stack([np.asarray(xs, float), np.asarray(ys, float)]))
    per_pt = ax.figure.dpi / 72.0
    line, placed = 1.25 * fontsize, []
    order = np.argsort(-pts[:, 1], kind="stable")
    for i in order:
        w = 0.6 * fontsize * len(texts[i])
        x0, dy = pts[i, 0] / per_pt + 4, 4.0
        for _ in range(len(texts)):
            y0 = pts[i, 1] / per_pt + dy
            if not any(
                x0 < bx + bw and bx < x0 + w and y0 < by + line and by < y0 + line
                for bx, by, bw in placed
            ):
                break
            dy -= line
        placed.append((x0, y0, w))
        ax.annotate(
            texts[i],
            (xs[i], ys[i]),
            xytext=(4, dy),
            textcoords="offset points",
            fontsize=fontsize,
            color=color,
            gid=None if gids is None else gids[i],
            arrowprops=None if dy == 4.0 else {"arrowstyle": "-", "color": "#999999", "lw": 0.5},
        )


def plain_log_ticks(ax: Any, axis: str = "both") -> None:
    """Tick labels of log axes as plain numbers (600, not 6 x 10^2) when every tick lies in
    [0.001, 100000]."""
    from matplotlib.ticker import FuncFormatter, NullFormatter

    for name in ("x", "y") if axis == "both" else (axis,):
        a = getattr(ax, f"{name}axis")
        if a.get_scale() != "log":
            continue
        lo, hi = sorted(getattr(ax, f"get_{name}lim")())
        if lo < 1e-3 or hi > 1e5:
            continue
        a.set_major_formatter(FuncFormatter(lambda t, _: f"{t:g}"))
        wide = hi / lo > 30
        a.set_minor_formatter(
            NullFormatter()
            if wide
            else FuncFormatter(
                lambda t, _: (
                    f"{t:g}" if round(t / 10 ** np.floor(np.log10(t) + 1e-9)) in (2, 3, 5) else ""
                )
            )
        )


def short_number(v: Any, digits: int = 3) -> str:
    """*v* with *digits* significant digits, or ``n/a`` when it is missing or not finite
    (:func:`comparo.base.numbers.number`, the one number formatter)."""
    from comparo.base.numbers import number

    return number(v, digits)
