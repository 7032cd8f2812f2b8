"""Behaviour of the report figures (small invented inputs)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from comparo.fitting import fit
from comparo.report import figures as plots


@pytest.fixture(scope="module")
def table():
    rng = np.random.default_rng(3)
    m = 10 ** rng.uniform(-4, 2, 30)
    f = 30 * m**-0.2 * 10 ** rng.normal(0, 0.05, 30)
    return pd.DataFrame(
        {
            "taxon": [f"t{i:02d}" for i in range(30)],
            "body_mass": m,
            "frequency_observed": f,
            "clade": ["A", "B", "C"] * 10,
        }
    )


def _points(res, table):
    pts = pd.DataFrame(list(res.points))
    pts["basis"] = ["reported", "digitized", "proxy"] * 10
    return pts


def test_render_is_byte_identical_across_calls(table):
    res = fit(table, "body_mass", "frequency_observed", "sma", by="clade")
    a = plots.render(plots.scaling_plot(res, _points(res, table), by="clade", seed=1))
    b = plots.render(plots.scaling_plot(res, _points(res, table), by="clade", seed=1))
    assert a == b
    assert a[0][:8] == b"\x89PNG\r\n\x1a\n" and b"<svg" in a[1]
    assert b"<dc:date>" not in a[1], "no date stamp in the SVG"


def test_axis_labels_carry_catalogue_units(table):
    from comparo.base.catalog import load_catalog

    cat = load_catalog()
    assert plots.axis_label("body_mass", cat) == "Body mass (kg)"
    assert "Hz" in plots.axis_label("frequency_observed", cat)
    assert "unit" in plots.axis_label("not_a_key", cat)


def test_line_band_covers_the_ols_line_and_narrows_with_more_data():
    """A pointwise 95% bootstrap band holds the full-sample OLS line at the centre of the data."""
    rng = np.random.default_rng(11)
    X = rng.uniform(0, 2, 200)
    Y = 1 + 0.5 * X + rng.normal(0, 0.1, 200)
    grid = np.linspace(0, 2, 9)
    lo, hi = plots.line_band(X, Y, "ols", grid, seed=2)
    b, a = np.polyfit(X, Y, 1)
    assert np.all(lo <= a + b * grid) and np.all(a + b * grid <= hi)
    lo2, hi2 = plots.line_band(X[:20], Y[:20], "ols", grid, seed=2)
    assert np.mean(hi2 - lo2) > np.mean(hi - lo)
    assert plots.line_band(X, Y, "robust", grid) is None


def test_weakest_basis_order():
    assert plots.weakest_basis("reported", "digitized") == "digitized"
    assert plots.weakest_basis("proxy", "computed") == "proxy"
    assert plots.weakest_basis("", "") == ""


def test_regime_plot_needs_derived_columns(table):
    assert plots.regime_plot(table) is None
    d = table.assign(
        frequency_kinetic_bound=50.0,
        frequency_hydraulic_bound=5.0,
        poro_kinetic_ratio=10.0,
        regime="hydraulic",
    )
    png, _ = plots.render(plots.regime_plot(d))
    assert len(png) > 5000


def test_diagnostics_and_coverage_and_sources(table):
    res = fit(table, "body_mass", "frequency_observed", "ols")
    from comparo.fitting.flags import fit_flags

    png, _ = plots.render(plots.diagnostics(fit_flags(res, _points(res, table))))
    assert len(png) > 5000
    cov = {
        "t1": {"body_mass": "reported", "fiber_radius": "proxy"},
        "t2": {"body_mass": "digitized"},
    }
    assert plots.render(plots.coverage_map(cov))[0][:4] == b"\x89PNG"
    src = pd.DataFrame({"source_id": ["s1", "s2"], "values": [5, 3], "taxa": [2, 1]})
    assert plots.render(plots.source_chart(src))[0][:4] == b"\x89PNG"


def test_lambda_profile_renders_with_interval():
    png, svg = plots.render(
        plots.lambda_profile(
            [0, 0.5, 1], [1.0, 3.0, 2.0], lam_hat=0.6, loglik_hat=3.1, lam_ci=[0.3, 0.9]
        )
    )
    assert png[:4] == b"\x89PNG" and b"<svg" in svg


# --------------------------------------------------------------------------- tree with a trait

FOUR = "((A:1,B:2):1,(C:1.5,D:0.5):0.5);"


def test_tree_layout_rows_follow_the_newick_order_and_nodes_sit_between_children():
    """Root-to-tip distances hand-computed from the Newick branch lengths: A 1+1, B 2+1, C 1.5+0.5,
    D 0.5+0.5."""
    lay = plots.tree_layout(FOUR)
    assert lay["tips"] == ("A", "B", "C", "D")
    assert lay["tip_y"].tolist() == [0, 1, 2, 3]
    assert lay["tip_x"].tolist() == pytest.approx([2.0, 3.0, 2.0, 1.0])
    segs = {tuple(map(tuple, np.round(s, 9))) for s in lay["segments"]}
    # connectors: (A,B) at x 1 spanning rows 0-1; (C,D) at x 0.5 spanning 2-3; root at x 0 spanning
    # their midpoints
    assert (
        ((1.0, 0.0), (1.0, 1.0)) in segs
        and ((0.5, 2.0), (0.5, 3.0)) in segs
        and ((0.0, 0.5), (0.0, 2.5)) in segs
    )
    assert ((1.0, 1.0), (3.0, 1.0)) in segs, (
        "edge above B runs from its parent (x 1) to its tip (x 3)"
    )
    assert len(segs) == 6 + 3, "one segment per edge, one connector per internal node"


def _gid(fig, gid):
    return next(c for c in fig.axes[0].collections if c.get_gid() == gid)


def test_tree_trait_maps_values_on_a_log_colour_scale_and_marks_missing_tips():
    import matplotlib

    fig = plots.tree_trait(
        FOUR,
        {"A": 1.0, "B": 10.0, "C": 100.0},
        label="Observed frequency (Hz)",
        names={"A": "Alpha one"},
    )
    fig.canvas.draw()
    tiles = _gid(fig, "trait-tiles")
    cmap = matplotlib.colormaps[plots.TRAIT_CMAP]
    got = tiles.get_facecolors()
    # log scale: 10 sits half-way between 1 and 100
    assert np.allclose(got[:, :3], [cmap(0.0)[:3], cmap(0.5)[:3], cmap(1.0)[:3]], atol=0.01)
    assert tiles.get_offsets()[:, 1].tolist() == [0, 1, 2]
    missing = _gid(fig, "no-value-tiles")
    assert missing.get_offsets()[:, 1].tolist() == [3]
    assert [t.get_text() for t in fig.axes[0].get_yticklabels()] == ["Alpha one", "B", "C", "D"]
    cbar = fig.axes[1]
    assert "Hz" in cbar.get_xlabel() and "log scale" in cbar.get_xlabel()
    png, svg = plots.render(fig)
    assert png[:4] == b"\x89PNG" and b"<svg" in svg


def test_tree_trait_drops_tip_labels_above_the_limit():
    from comparo.phylo import random_newick

    big = random_newick(plots.TREE_LABEL_LIMIT + 1, seed=5)
    fig = plots.tree_trait(big, {}, label="x (Hz)")
    assert [t.get_text() for t in fig.axes[0].get_yticklabels() if t.get_text()] == []
    assert "no tip labels" in fig.axes[0].get_title()
    w, h = fig.get_size_inches()
    assert h <= 19.0
    small = plots.tree_trait(random_newick(40, seed=5), {}, label="x (Hz)")
    assert len(small.axes[0].get_yticklabels()) == 40


def test_forest_plot_draws_each_refit_against_the_full_data_line_and_band():
    rows = [
        {"source_id": "S1", "n": 40, "slope": -0.20, "slope_ci": [-0.25, -0.15], "flips": False},
        {"source_id": "S2", "n": 30, "slope": -0.30, "slope_ci": [-0.35, -0.22], "flips": True},
        {"source_id": "S3", "n": 2, "slope": None, "slope_ci": [None, None], "flips": False},
    ]
    fig = plots.forest_plot(rows, slope=-0.21, slope_ci=[-0.23, -0.19])
    ax = fig.axes[0]
    points = [ln for ln in ax.get_lines() if ln.get_marker() in ("o", "D")]
    assert [(ln.get_xdata()[0], ln.get_ydata()[0]) for ln in points] == [(-0.20, 0), (-0.30, 1)]
    assert points[1].get_marker() == "D", "a source that flips the test is marked"
    vline = [ln for ln in ax.get_lines() if list(ln.get_xdata()) == [-0.21, -0.21]]
    assert vline, "vertical line at the full-data slope"
    band = ax.patches[0]
    x0, x1 = band.get_x(), band.get_x() + band.get_width()
    assert (x0, x1) == pytest.approx((-0.23, -0.19))
    labels = [t.get_text() for t in ax.get_yticklabels()]
    assert labels[0] == "without S1 (n = 40)"
    # a source whose removal leaves too few taxa: the taxa left, not a misleading n = 0
    assert labels[2] == "without S3 (not refitted; 2 taxa left)"


def test_empty_coverage_renders_a_placeholder():
    png, svg = plots.render(plots.coverage_map({}))
    assert png[:4] == b"\x89PNG" and b"no values to map" in svg


def test_long_labels_are_cut_with_an_ellipsis():
    assert plots.short("Apis mellifera") == "Apis mellifera"
    cut = plots.short("x" * 10_000)
    assert len(cut) == 40 and cut.endswith("\u2026")
