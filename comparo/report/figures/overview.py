"""Figures of the whole compilation in the report: the regime picture, the coverage map,
the contribution of each source, and the loop of each trace."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.figure_style import (
    BASIS_COLOURS,
    BASIS_ORDER,
    PALETTE,
    STYLE,
    new_figure,
    plain_log_ticks,
    pyplot,
    short,
)

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd
    from matplotlib.figure import Figure


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
    fig, ax = new_figure(9.2, 4.6)
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
        fig, ax = new_figure(5.0, 3.0)
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
    fig, ax = new_figure(max(5.0, 0.42 * len(qs) + 3.2), max(4.0, 0.16 * len(taxa) + 1.8))
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
    fig, ax = new_figure(6.4, max(3.0, 0.28 * len(s) + 1.2))
    yy = np.arange(len(s))
    ax.barh(yy - 0.2, s["values"], height=0.4, color=PALETTE[0], label="values")
    ax.barh(yy + 0.2, s["taxa"], height=0.4, color=PALETTE[1], label="taxa")
    ax.set_yticks(yy, [short(v) for v in s["source_id"]])
    ax.set_xlabel("count (values or taxa)")
    ax.set_ylabel("source (source_id)")
    ax.set_title("Contribution of each source")
    ax.legend(frameon=False, loc="lower right")
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
    fig, ax = new_figure(4.6, 3.8)
    with pyplot().rc_context(STYLE):
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
