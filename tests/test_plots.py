"""Behaviour of the report figures (small invented inputs)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from comparo import plots
from comparo.fit import fit


@pytest.fixture(scope="module")
def table():
    rng = np.random.default_rng(3)
    m = 10 ** rng.uniform(-4, 2, 30)
    f = 30 * m ** -0.2 * 10 ** rng.normal(0, 0.05, 30)
    return pd.DataFrame({"taxon": [f"t{i:02d}" for i in range(30)], "body_mass": m, "frequency_observed": f,
                         "clade": ["A", "B", "C"] * 10})


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
    from comparo.catalog import load_catalog

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
    d = table.assign(frequency_kinetic_bound=50.0, frequency_hydraulic_bound=5.0, poro_kinetic_ratio=10.0,
                     regime="hydraulic")
    png, _ = plots.render(plots.regime_plot(d))
    assert len(png) > 5000


def test_diagnostics_and_coverage_and_sources(table):
    res = fit(table, "body_mass", "frequency_observed", "ols")
    png, _ = plots.render(plots.diagnostics(_points(res, table)))
    assert len(png) > 5000
    cov = {"t1": {"body_mass": "reported", "fiber_radius": "proxy"}, "t2": {"body_mass": "digitized"}}
    assert plots.render(plots.coverage_map(cov))[0][:4] == b"\x89PNG"
    src = pd.DataFrame({"source_id": ["s1", "s2"], "values": [5, 3], "taxa": [2, 1]})
    assert plots.render(plots.source_chart(src))[0][:4] == b"\x89PNG"


def test_lambda_profile_renders_with_interval():
    png, svg = plots.render(plots.lambda_profile([0, 0.5, 1], [1.0, 3.0, 2.0], lam_hat=0.6, loglik_hat=3.1,
                                                 lam_ci=[0.3, 0.9]))
    assert png[:4] == b"\x89PNG" and b"<svg" in svg
