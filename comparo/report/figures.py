"""Figures of the report: scaling plots, residual diagnostics, the regime picture,
coverage and source contributions (matplotlib, Agg backend).

Every function takes result objects or DataFrames and returns a
:class:`matplotlib.figure.Figure`; :func:`render` turns a figure into PNG and SVG
bytes that are identical from run to run (fixed SVG hash salt, no date or
software stamp in the file metadata).

Colours are the eight-colour palette for colour-blind readers of Okabe and Ito
(2002, "Color Universal Design", J*FLY). Marker fill shows the weakest basis of
a point: filled = reported, left half filled = digitized, lower half filled =
computed, open = proxy or assumed.

References
----------
Okabe M, Ito K (2002). Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people. J*FLY Data Depository.
Cook RD (1977). Detection of influential observation in linear regression.
Technometrics 19: 15-18.
Blom G (1958). Statistical Estimates and Transformed Beta-Variables. Wiley
(plotting positions (i - 3/8)/(n + 1/4) of the normal QQ plot).
"""

from __future__ import annotations

import io
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.numbers import number
from comparo.base.scales import from_scale

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd
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


def _plt():
    matplotlib_cache()
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def _figure(w: float = 6.4, h: float = 4.4, ncols: int = 1):
    plt = _plt()
    with plt.rc_context(STYLE):
        fig, axes = plt.subplots(1, ncols, figsize=(w, h), layout="constrained")
    return fig, axes


def short(label: object, limit: int = 40) -> str:
    """*label* as text, cut to *limit* characters with an ellipsis (long names would crush the axes)."""
    text = str(label)
    return text if len(text) <= limit else text[: limit - 1] + "\u2026"


def render(fig: Figure) -> tuple[bytes, bytes]:
    """PNG and SVG bytes of *fig*, byte-identical across runs; the figure is closed."""
    plt = _plt()
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

    With *temperature* (a fit's ``temperature``, :func:`comparo.validation.temperature.fit_temperature`),
    a temperature-sensitive quantity says the temperature its values refer to: ``at 25 °C``,
    ``at operating temperature`` or ``at measured temperature`` (normalisation off), and
    when endotherms (or heterotherms at their operating temperature) kept in-vivo values as
    measured, that those are at body temperature."""
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
    """Tick labels of log axes as plain numbers (600, not 6 x 10^2) when every tick lies in [0.001, 100000]."""
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
    fig, ax = _figure(9.2, 4.6)
    draw_scaling(ax, fit, points, catalog=catalog, by=by, seed=seed, title=title)
    return fig


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

    def inv(v):
        return from_scale(v, fit.log)

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
        f"{who}: b = {number(fit.slope, 3)} ({pct} CI {number(lo, 3)} to {number(hi, 3)}), "
        f"a = {number(fit.intercept, 3)}"
    )
    if fit.lambda_ is not None:
        eq += f", λ = {number(fit.lambda_, 3)}"
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
            label=f"{g}: b = {number(gr['slope'], 3)} ({number(glo, 3)} to {number(ghi, 3)})",
        )
    from matplotlib.lines import Line2D

    handles, labels = ax.get_legend_handles_labels()
    for g in groups:  # every point colour is named: each group, with or without a line of its own
        handles.append(Line2D([], [], ls="", marker="o", color=colour[g]))
        k = len(points) if g is None else int((points["group"] == g).sum())
        labels.append(f"{'taxa' if g is None else g} (n = {k})")
    for basis in dict.fromkeys(points["basis"]):
        if basis in BASIS_FILL:
            handles.append(
                Line2D([], [], ls="", marker="o", color="#555555", fillstyle=BASIS_FILL[basis])
            )
            labels.append(f"basis: {basis}")
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


#: Residual kinds of :class:`comparo.fitting.flags.FlagReport`, as the figure names them.
RESIDUAL_NAMES = {
    "ols": "least-squares residuals of y on x (fitted scale)",
    "whitened": "phylogenetically whitened residuals (PGLS)",
}
#: At most this many flagged points are named in the diagnostics figure (all are coloured).
DIAGNOSTIC_LABELS = 15


def diagnostics(report: Any, *, title: str = "") -> Figure:
    """Studentized residual against fitted value, its normal QQ plot, and leverage against
    Cook's distance, drawn from the statistics and cut-offs of a flag report.

    Parameters
    ----------
    report : comparo.fitting.flags.FlagReport
        Its ``table`` (fitted, studentized, leverage, cooks_d per point), ``cuts`` and
        ``flags``: the figure shows exactly the statistics the flags test, the cut-offs
        they use, and marks exactly the flagged points (vermillion; named up to
        :data:`DIAGNOSTIC_LABELS`).

    Notes
    -----
    For SVG readers: every named point is a text with ``gid="flag-label:<label>"``, every
    cut-off line has ``gid="cut:<name>:<value>"`` (value as Python ``repr``).
    """
    import pandas as pd
    from scipy import stats

    t = pd.DataFrame(list(report.table))
    cuts = report.cuts
    flagged = list(dict.fromkeys(f.label for f in report.flags))
    mark = t["label"].isin(flagged).to_numpy()
    fig, axes = _figure(10.4, 4.0, ncols=3)
    stud, fitted = t["studentized"].to_numpy(float), t["fitted"].to_numpy(float)
    lev, cook = t["leverage"].to_numpy(float), t["cooks_d"].to_numpy(float)
    scale = "fitted value a + b x (log scale of y)"

    def dots(ax, xs, ys):
        ax.plot(
            xs[~mark],
            ys[~mark],
            ls="",
            marker="o",
            color=PALETTE[0],
            label=f"not flagged ({int((~mark).sum())})",
        )
        if mark.any():
            ax.plot(
                xs[mark],
                ys[mark],
                ls="",
                marker="o",
                color=PALETTE[3],
                label=f"flagged ({len(flagged)})",
            )

    ax = axes[0]
    ax.axhline(0, color="#777777", lw=0.8)
    bc = cuts["bonferroni"]
    for sign in (1, -1):
        ax.axhline(
            sign * bc,
            color="#777777",
            lw=0.8,
            ls="--",
            gid=f"cut:bonferroni:{bc!r}",
            label=f"Bonferroni cut ±{bc:.3g}" if sign > 0 else None,
        )
    dots(ax, fitted, stud)
    ax.set_xlabel(scale)
    ax.set_ylabel("studentized residual (dimensionless)")
    ax.set_title("residual against fitted")
    ax = axes[1]
    order = np.argsort(stud)
    q = stats.norm.ppf(
        (np.arange(1, len(stud) + 1) - 0.375) / (len(stud) + 0.25)
    )  # Blom (1958) positions
    ax.plot(q, q, color="#000000", lw=1)
    ax.plot(q[~mark[order]], stud[order][~mark[order]], ls="", marker="o", color=PALETTE[0])
    ax.plot(q[mark[order]], stud[order][mark[order]], ls="", marker="o", color=PALETTE[3])
    ax.set_xlabel("normal quantile (standard units)")
    ax.set_ylabel("ordered studentized residual (dimensionless)")
    ax.set_title("normal QQ")
    ax = axes[2]
    dots(ax, lev, cook)
    c4, cf, cl = cuts["cooks_4n"], cuts["cooks_f"], cuts["leverage"]
    ax.axhline(
        c4,
        color="#777777",
        lw=0.8,
        ls=":",
        gid=f"cut:cooks_4n:{c4!r}",
        label=f"Cook's D 4/n = {c4:.3g}",
    )
    ax.axvline(
        cl,
        color="#777777",
        lw=0.8,
        ls="--",
        gid=f"cut:leverage:{cl!r}",
        label=f"leverage 2p/n = {cl:.3g}",
    )
    top = max(float(np.nanmax(cook)) if len(cook) else 0.0, c4) * 1.15
    if cf <= top:
        ax.axhline(
            cf,
            color="#000000",
            lw=0.8,
            ls=":",
            gid=f"cut:cooks_f:{cf!r}",
            label=f"Cook's D F(0.5) = {cf:.3g}",
        )
    else:  # the stronger cut lies above every point: named, not drawn (it would flatten the panel)
        ax.plot(
            [],
            [],
            ls="",
            gid=f"cut:cooks_f:{cf!r}",
            label=f"Cook's D F(0.5) = {cf:.3g} (above the panel)",
        )
    named = [i for i in np.argsort(-cook) if mark[i]][:DIAGNOSTIC_LABELS]
    if named:
        label_points(
            ax,
            lev[named],
            cook[named],
            [short(t["label"].iat[i], 24) for i in named],
            fontsize=6.5,
            gids=[f"flag-label:{t['label'].iat[i]}" for i in named],
            color="#000000",
        )
    ax.set_xlabel("leverage h (dimensionless)")
    ax.set_ylabel("Cook's distance (dimensionless)")
    ax.set_title("leverage and influence")
    handles, names = [], []
    for a in axes:
        for hd, nm in zip(*a.get_legend_handles_labels(), strict=True):
            if nm not in names:
                handles.append(hd)
                names.append(nm)
    fig.legend(
        handles,
        names,
        loc="outside lower center",
        ncols=min(len(names), 5),
        frameon=False,
        fontsize=7.5,
    )
    kind = RESIDUAL_NAMES.get(report.residuals, report.residuals)
    fig.suptitle(f"Diagnostics: {title}; {kind}" if title else f"Diagnostics: {kind}", fontsize=10)
    return fig


def regime_plot(derived: pd.DataFrame, *, taxon_col: str = "taxon") -> Figure | None:
    """Observed frequency over the kinetic bound against the poro-kinetic ratio.

    y = frequency_observed / frequency_kinetic_bound, x = poro_kinetic_ratio
    (poroelastic_time / kinetic_time), both dimensionless, log axes. The kinetic
    bound is the line y = 1; the hydraulic bound is drawn from each taxon's own
    frequency_hydraulic_bound / frequency_kinetic_bound. Points are coloured by
    the derived ``regime``. Returns None when the derived columns hold no usable row.
    """
    need = [
        "frequency_observed",
        "frequency_kinetic_bound",
        "frequency_hydraulic_bound",
        "poro_kinetic_ratio",
    ]
    if any(c not in derived for c in need):
        return None
    d = derived.copy()
    vals = {c: np.asarray(d[c], dtype=float) for c in need}
    with np.errstate(divide="ignore", invalid="ignore"):
        yk = vals["frequency_observed"] / vals["frequency_kinetic_bound"]
        yh = vals["frequency_hydraulic_bound"] / vals["frequency_kinetic_bound"]
    xr = vals["poro_kinetic_ratio"]
    ok = np.isfinite(yk) & np.isfinite(xr) & (yk > 0) & (xr > 0)
    if not ok.any():
        return None
    fig, ax = _figure(9.2, 4.6)
    regime = (
        d["regime"].astype("string").fillna("").to_numpy()
        if "regime" in d
        else np.array([""] * len(d))
    )
    words = {
        "kinetic": "kinetic limited",
        "hydraulic": "hydraulic limited",
        "undetermined": "undetermined (95% interval of Π holds the boundary)",
        "": "no regime",
    }
    pos = (
        d["frequency_vs_bound"].astype("string").fillna("").to_numpy()
        if "frequency_vs_bound" in d
        else np.array([""] * len(d))
    )
    above = ok & (pos == "above")
    colours = {
        "kinetic": PALETTE[1],
        "hydraulic": PALETTE[0],
        "undetermined": PALETTE[2],
        "": "#999999",
    }
    present = set(regime[ok])
    for r in [k for k in colours if k in present] + sorted(present - set(colours)):  # fixed colours
        m = ok & (regime == r)
        a = int((m & above).sum())  # ringed below: counted apart, as limited by neither
        label = f"{words.get(r, r)} (n = {m.sum()})"
        if a and r in ("kinetic", "hydraulic"):
            label = (
                f"{r} side of Π (n = {m.sum()}): {m.sum() - a} {r} limited, "
                f"{a} above their smaller bound"
            )
        ax.plot(xr[m], yk[m], ls="", marker="o", color=colours.get(r, PALETTE[4]), label=label)
    if above.any():
        ax.plot(
            xr[above],
            yk[above],
            ls="",
            marker="o",
            markersize=11,
            markerfacecolor="none",
            color="#000000",
            label=f"above its smaller bound: limited by neither (n = {above.sum()})",
        )
    ax.axhline(1.0, color="#000000", lw=1.4, label="kinetic bound (observed = kinetic bound)")
    okh = ok & np.isfinite(yh) & (yh > 0)
    if okh.any():
        order = np.argsort(xr[okh])
        ax.plot(
            xr[okh][order],
            yh[okh][order],
            color=PALETTE[3],
            lw=1.4,
            ls="--",
            label="hydraulic bound (per taxon)",
        )
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("Π = poroelastic / kinetic time (dimensionless)")
    ax.set_ylabel("observed frequency / kinetic bound (dimensionless)")
    ax.set_title(f"Regime within the uncertainty of Π ({int(ok.sum())} taxa)")
    plain_log_ticks(ax)
    ax.legend(frameon=False, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return fig


def coverage_map(
    coverage: Mapping[str, Mapping[str, str]], quantities: Sequence[str] | None = None
) -> Figure:
    """Taxon by quantity grid coloured by the weakest basis (white: no value).

    *coverage* is the audit's ``{taxon: {quantity: basis}}``.
    """
    from matplotlib.colors import ListedColormap
    from matplotlib.patches import Patch

    taxa = sorted(coverage)
    qs = list(quantities) if quantities else sorted({q for v in coverage.values() for q in v})
    keys = list(BASIS_ORDER) + [""]
    if not taxa or not qs:
        fig, ax = _figure(5.0, 3.0)
        ax.set_axis_off()
        ax.text(0.5, 0.5, "no values to map", ha="center", va="center", transform=ax.transAxes)
        ax.set_title("Coverage: weakest basis of each value")
        return fig
    code = np.array(
        [
            [
                keys.index(coverage[t].get(q) or "")
                if (coverage[t].get(q) or "") in keys
                else len(keys) - 1
                for q in qs
            ]
            for t in taxa
        ],
        dtype=float,
    )
    fig, ax = _figure(max(5.0, 0.42 * len(qs) + 3.2), max(4.0, 0.16 * len(taxa) + 1.8))
    cmap = ListedColormap([BASIS_COLOURS[k] for k in keys])
    ax.imshow(
        code, aspect="auto", cmap=cmap, vmin=-0.5, vmax=len(keys) - 0.5, interpolation="nearest"
    )
    ax.set_xticks(range(len(qs)), [short(q) for q in qs], rotation=60, ha="right", fontsize=7)
    ax.set_yticks(range(len(taxa)), [short(t) for t in taxa], fontsize=6 if len(taxa) > 30 else 8)
    ax.grid(False)
    ax.set_xlabel("quantity (catalogue key)")
    ax.set_ylabel("taxon (accepted name)")
    ax.set_title("Coverage: weakest basis of each value")
    ax.legend(
        [Patch(facecolor=BASIS_COLOURS[k], edgecolor="#999999") for k in keys],
        [k or "no value" for k in keys],
        loc="upper left",
        bbox_to_anchor=(1.01, 1),
        frameon=False,
    )
    return fig


def source_chart(sources: pd.DataFrame) -> Figure:
    """Horizontal bars: values and taxa contributed by each source (audit ``sources_frame()``)."""
    s = sources.sort_values(["values", "source_id"], ascending=[True, True])
    fig, ax = _figure(6.4, max(3.0, 0.28 * len(s) + 1.2))
    yy = np.arange(len(s))
    ax.barh(yy - 0.2, s["values"], height=0.4, color=PALETTE[0], label="values")
    ax.barh(yy + 0.2, s["taxa"], height=0.4, color=PALETTE[1], label="taxa")
    ax.set_yticks(yy, [short(v) for v in s["source_id"]])
    ax.set_xlabel("count (values or taxa)")
    ax.set_ylabel("source (source_id)")
    ax.set_title("Contribution of each source")
    ax.legend(frameon=False, loc="lower right")
    return fig


def lambda_profile(
    lambdas: Sequence[float],
    logliks: Sequence[float],
    *,
    lam_hat: float,
    loglik_hat: float,
    lam_ci: Sequence[float] | None = None,
    ci: float = 0.95,
    title: str = "",
) -> Figure:
    """Profile log-likelihood of Pagel's lambda with its maximum and the likelihood-ratio cut.

    The cut is loglik_hat - χ²₁(ci)/2: lambda values above it lie inside the
    profile interval (Pagel 1999, Nature 401: 877-884).
    """
    from scipy import stats

    fig, ax = _figure(6.4, 4.0)
    lam = np.asarray(lambdas, float)
    ll = np.asarray(logliks, float)
    order = np.argsort(lam)
    ax.plot(
        lam[order],
        ll[order],
        color=PALETTE[0],
        marker="o",
        lw=1.4,
        label="log-likelihood at fixed λ",
    )
    cut = loglik_hat - stats.chi2.ppf(ci, 1) / 2
    ax.axhline(cut, color="#777777", ls=":", lw=1, label=f"{100 * ci:g}% likelihood-ratio cut")
    ax.plot(
        [lam_hat],
        [loglik_hat],
        marker="D",
        color=PALETTE[3],
        ls="",
        label=f"maximum: λ = {number(lam_hat, 3)}",
    )
    if lam_ci is not None and all(v is not None and np.isfinite(v) for v in lam_ci):
        ax.axvspan(
            lam_ci[0],
            lam_ci[1],
            color=PALETTE[3],
            alpha=0.12,
            lw=0,
            label=f"interval {number(lam_ci[0], 3)} to {number(lam_ci[1], 3)}",
        )
    ax.set_xlabel("Pagel's λ (dimensionless)")
    ax.set_ylabel("log-likelihood (dimensionless)")
    ax.set_title(title or "Profile likelihood of λ")
    ax.legend(frameon=False, loc="lower right")
    return fig


#: Above this many tips the tree is drawn without tip labels (they could not be read).
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
    fig, ax = _figure(8.0, height)
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
        f"{title or 'Phylogeny with the trait at the tips'}\n({n} tips, {int(ok.sum())} with a value{missing}"
        + ("" if labelled else f"; no tip labels above {max_labels} tips")
        + ")"
    )
    return fig


def forest_plot(
    rows: Sequence[Mapping[str, Any]],
    *,
    slope: float,
    slope_ci: Sequence[float],
    ci: float = 0.95,
    xlabel: str = "slope (dimensionless on log-log axes)",
    title: str = "",
) -> Figure:
    """Leave-one-source-out slopes with their CIs, one row per dropped source.

    Parameters
    ----------
    rows : sequence of mapping
        ``{"source_id", "n", "slope", "slope_ci", "flips"}`` as in
        :attr:`comparo.fitting.source_sensitivity.SensitivityResult.leave_one_source_out`, drawn top to
        bottom in the given order (most influential first). A row with no slope (the
        refit could not run) is named but has no point.
    slope, slope_ci : the fit on all data: a vertical line and a shaded band.
    ci : confidence level of the intervals.
    """
    n = len(rows)
    fig, ax = _figure(7.2, min(18.0, max(2.8, 0.27 * n + 1.6)))
    pct = f"{100 * ci:g}%"
    lo, hi = slope_ci
    if lo is not None and hi is not None and np.isfinite(lo) and np.isfinite(hi):
        ax.axvspan(
            lo,
            hi,
            color="#000000",
            alpha=0.10,
            lw=0,
            label=f"all data: {pct} CI {number(lo, 3)} to {number(hi, 3)}",
        )
    ax.axvline(slope, color="#000000", lw=1.3, label=f"all data: slope {number(slope, 3)}")
    yy = np.arange(n)
    names = []
    drawn = {False: False, True: False}
    for i, r in enumerate(rows):
        s = r.get("slope")
        note = "" if s is not None and np.isfinite(s) else "not refitted"
        names.append(
            f"without {r['source_id']} ("
            + (f"{note}; {r.get('n', 0)} taxa left)" if note else f"n = {r.get('n', 0)})")
        )
        if note:
            continue
        flip = bool(r.get("flips"))
        clo, chi = r.get("slope_ci") or (None, None)
        colour, marker = (PALETTE[3], "D") if flip else (PALETTE[0], "o")
        if clo is not None and chi is not None and np.isfinite(clo) and np.isfinite(chi):
            ax.plot([clo, chi], [i, i], color=colour, lw=1.4, solid_capstyle="butt")
        lab = None
        if not drawn[flip]:
            lab = (
                "without the source: flips the slope test"
                if flip
                else f"without the source: slope and {pct} CI"
            )
            drawn[flip] = True
        ax.plot([s], [i], ls="", marker=marker, color=colour, label=lab)
    ax.set_yticks(yy, [short(v) for v in names], fontsize=8 if n <= 40 else 6)
    ax.set_ylim(n - 0.5, -0.5)
    ax.grid(axis="y", visible=False)
    ax.set_xlabel(xlabel)
    ax.set_ylabel("refit without one source (source_id)")
    ax.set_title(f"{title or 'Leave one source out'}\n({n} sources, most influential at the top)")
    ax.legend(frameon=False, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return fig


def loop_plot(trace: Any) -> Figure:
    """One trace's whole cycles (a :class:`comparo.traces.files.TraceResult`, drift removed) with
    arrows giving the direction of travel. Strain cycles: axial strain (%) across, radial (%)
    up, with the isochoric curve (1+e_a)^(-1/2) - 1; work loops: length (mm) across, force
    (mN) up. The title gives the mean signed area or net work (counter-clockwise positive)."""
    from comparo.traces.oscillation import isochoric_radial

    t, x, y = trace.signals
    strain = trace.kind == "strain_cycle"
    sx, sy = (100.0, 100.0) if strain else (1e3, 1e3)
    fig, ax = _figure(4.6, 3.8)
    with _plt().rc_context(STYLE):
        for k, (a, b) in enumerate(trace.cycle_bounds):
            inside = (t >= a) & (t <= b)
            xs, ys = x[inside] * sx, y[inside] * sy
            ax.plot(
                xs,
                ys,
                color=PALETTE[0],
                lw=0.9,
                alpha=0.75,
                label="whole cycles" if k == 0 else None,
            )
            step = max(2, len(xs) // 25)
            for j in (
                ((len(xs) * q) // 8 for q in (1, 3, 5, 7)) if k == 0 else ()
            ):  # direction of travel
                if j + step < len(xs):
                    ax.annotate(
                        "",
                        xy=(xs[j + step], ys[j + step]),
                        xytext=(xs[j], ys[j]),
                        arrowprops={
                            "arrowstyle": "-|>",
                            "color": PALETTE[6],
                            "lw": 1.2,
                            "mutation_scale": 16,
                        },
                    )
        if strain:
            grid = np.linspace(float(np.min(x)), float(np.max(x)), 200)
            ax.plot(
                grid * 100,
                isochoric_radial(grid) * 100,
                color=PALETTE[3],
                lw=1.2,
                ls="--",
                label="isochoric: (1+ε_a)^(-1/2) − 1",
            )
            ax.set_xlabel("axial strain ε_a (%)")
            ax.set_ylabel("radial strain ε_r (%)")
            area = trace.values["loop_area"][0] * sx * sy  # strain fraction² -> %², the axes' units
            what = f"signed area {area:.4g} %²"
        else:
            ax.set_xlabel("length (mm)")
            ax.set_ylabel("force (mN)")
            what = f"net work {trace.values['net_work'][0] * 1e6:.4g} µJ per cycle"
        ax.set_title(
            short(f"{trace.trace_id} · {trace.taxon}", 48) + f"\n{what} ({trace.cycles} cycles)",
            fontsize=9,
        )
        ax.legend(loc="best", frameon=False)
    return fig
