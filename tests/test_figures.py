"""The report figures, read back from their matplotlib Figure objects: every axis with
ticks has a label naming its unit in parentheses, every colour of plotted points is in
a legend, and the strain-loop area printed on a loop figure is the area of the curve as
drawn, in the units of its axes (own shoelace on the drawn line; the area of an
ellipse with semi-axes a, b is π·a·b, handbook geometry). Invented data.
"""

from __future__ import annotations

import math
import re
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import to_hex

from comparo.fitting import fit
from comparo.report import figures as plots

UNIT = re.compile(r"\(.+\)")


def _axes_labelled(fig) -> list[str]:
    """Every visible axis with tick labels, whose label does not name a unit in parentheses."""
    bad = []
    for ax in fig.axes:
        if not ax.axison:
            continue
        for name, axis in (("x", ax.xaxis), ("y", ax.yaxis)):
            if not axis.get_visible() or len(axis.get_ticklocs()) == 0:
                continue
            label = axis.get_label_text()
            if not UNIT.search(label or ""):
                bad.append(f"{ax.get_title()[:30]!r} {name}: {label!r}")
    return bad


def _legend_colours(fig) -> set[str]:
    out = set()
    legends = [ax.get_legend() for ax in fig.axes if ax.get_legend() is not None]
    legends += list(fig.legends)
    for leg in legends:
        for h in leg.legend_handles:
            for get in ("get_color", "get_markerfacecolor", "get_markeredgecolor", "get_facecolor"):
                if hasattr(h, get):
                    try:
                        out.add(to_hex(getattr(h, get)()))
                    except (ValueError, TypeError):
                        pass
    return out


def _point_colours(fig) -> set[str]:
    """Colours of plotted points (marker-only lines) in every axes."""
    out = set()
    for ax in fig.axes:
        for line in ax.get_lines():
            no_marker = line.get_marker() in (None, "None", "", " ")
            if no_marker or line.get_linestyle() not in ("None", "", " "):
                continue
            if len(line.get_xdata()):
                out.add(to_hex(line.get_color()))
    return out


def _check(fig) -> None:
    assert _axes_labelled(fig) == []
    missing = _point_colours(fig) - _legend_colours(fig)
    assert not missing, f"point colours not in any legend: {missing}"


@pytest.fixture(scope="module")
def table():
    rng = np.random.default_rng(3)
    m = 10 ** rng.uniform(-4, 2, 32)
    f = 30 * m**-0.2 * 10 ** rng.normal(0, 0.05, 32)
    clade = ["A", "B", "C"] * 10 + ["D", "D"]  # D: two taxa, no line of its own
    return pd.DataFrame(
        {
            "taxon": [f"t{i:02d}" for i in range(32)],
            "body_mass": m,
            "frequency_observed": f,
            "clade": clade,
        }
    )


def test_scaling_plot_names_every_group_colour_and_units(table):
    from comparo.base.catalog import load_catalog

    res = fit(table, "body_mass", "frequency_observed", "sma", by="clade")
    pts = pd.DataFrame(list(res.points))
    _check(plots.scaling_plot(res, pts, catalog=load_catalog(), by="clade", seed=1))


def test_scaling_plot_of_a_derived_key_and_of_a_plain_table_have_units(table):
    from comparo.base.catalog import load_catalog

    d = table.assign(frequency_kinetic_bound=table["frequency_observed"] * 2)
    res = fit(d, "frequency_kinetic_bound", "frequency_observed", "ols")
    fig = plots.scaling_plot(res, pd.DataFrame(list(res.points)), catalog=load_catalog(), seed=1)
    assert fig.axes[0].get_xlabel().endswith("(Hz)")
    _check(fig)
    plain = table.rename(columns={"body_mass": "mass"})
    res = fit(plain, "mass", "frequency_observed", "ols")
    _check(plots.scaling_plot(res, pd.DataFrame(list(res.points)), catalog=None, seed=1))


def test_diagnostics_legend_names_flagged_and_other_points(table):
    from comparo.fitting.flags import fit_flags

    res = fit(table, "body_mass", "frequency_observed", "ols")
    _check(plots.diagnostics(fit_flags(res, pd.DataFrame(list(res.points)))))


def test_regime_coverage_sources_lambda_forest_and_tree_figures():
    d = pd.DataFrame(
        {
            "taxon": list("abcd"),
            "frequency_observed": [5.0, 50.0, 20.0, 8.0],
            "frequency_kinetic_bound": [50.0, 40.0, 10.0, 30.0],
            "frequency_hydraulic_bound": [5.0, 400.0, 12.0, 31.0],
            "poro_kinetic_ratio": [10.0, 0.1, 0.83, 0.97],
            "regime": ["hydraulic", "kinetic", "undetermined", None],
            "frequency_vs_bound": ["below", "above", "undetermined", None],
        }
    )
    _check(plots.regime_plot(d))
    _check(plots.coverage_map({"t1": {"body_mass": "reported", "fiber_radius": "proxy"}}))
    sources = pd.DataFrame({"source_id": ["s1", "s2"], "values": [5, 3], "taxa": [2, 1]})
    _check(plots.source_chart(sources))
    _check(
        plots.lambda_profile(
            [0, 0.5, 1], [1.0, 3.0, 2.0], lam_hat=0.6, loglik_hat=3.1, lam_ci=[0.3, 0.9]
        )
    )
    rows = [
        {"source_id": "S1", "n": 9, "slope": -0.2, "slope_ci": [-0.25, -0.15], "flips": False},
        {"source_id": "S2", "n": 9, "slope": -0.1, "slope_ci": [-0.2, 0.0], "flips": True},
    ]
    _check(plots.forest_plot(rows, slope=-0.21, slope_ci=[-0.23, -0.19]))
    _check(
        plots.tree_trait(
            "((A:1,B:1):1,(C:1,D:1):1);",
            {"A": 1.0, "B": 10.0, "C": 100.0},
            label="Observed frequency (Hz)",
        )
    )


def _ellipse_trace(kind: str, a: float, b: float, value: float) -> SimpleNamespace:
    t = np.linspace(0, 3, 3 * 400 + 1)
    x, y = a * np.cos(2 * np.pi * t), b * np.sin(2 * np.pi * t)
    key = "loop_area" if kind == "strain_cycle" else "net_work"
    return SimpleNamespace(
        signals=(t, x, y),
        kind=kind,
        cycle_bounds=[(0.0, 1.0), (1.0, 2.0), (2.0, 3.0)],
        values={key: (value, 0.0)},
        trace_id="e1",
        taxon="Ellipsia",
        cycles=3,
    )


def _drawn_area(ax) -> float:
    """Own shoelace area of the first drawn cycle, in the units of the axes."""
    line = ax.get_lines()[0]
    x, y = np.asarray(line.get_xdata(), float), np.asarray(line.get_ydata(), float)
    return 0.5 * float(np.sum(x[:-1] * y[1:] - x[1:] * y[:-1]))


@pytest.mark.parametrize("kind, a, b", [("strain_cycle", 0.02, 0.01), ("work_loop", 0.5e-3, 2e-3)])
def test_loop_area_is_printed_in_the_units_of_its_axes(kind, a, b):
    """Strain in the trace is a fraction (area in fraction²), the axes in %: the title must
    give the area in %²; a work loop's axes are mm and mN, whose product is µJ."""
    exact = math.pi * a * b  # SI: fraction² or J
    fig = plots.loop_plot(_ellipse_trace(kind, a, b, exact))
    ax = fig.axes[0]
    _check(fig)
    drawn = _drawn_area(ax)
    title = ax.get_title()
    number = float(re.search(r"(?:area|work) (-?[0-9.]+(?:e-?\d+)?)", title).group(1))
    assert number == pytest.approx(drawn, rel=2e-3), title
    unit = "%²" if kind == "strain_cycle" else "µJ"
    assert unit in title
    x_unit = re.search(r"\((.+)\)", ax.get_xlabel()).group(1)
    y_unit = re.search(r"\((.+)\)", ax.get_ylabel()).group(1)
    assert (x_unit, y_unit) == (("%", "%") if kind == "strain_cycle" else ("mm", "mN"))
