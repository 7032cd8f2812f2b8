"""Added-variable (partial-regression) plots: on the figure's own data, the slope of each panel
equals the coefficient of the full model from statsmodels OLS (and, for PGLS, from statsmodels
GLS with the dense Pagel covariance built here from the tree), and the y residuals of a panel
are the full model's residuals (Frisch-Waugh-Lovell theorem; Cook & Weisberg 1982, Residuals
and Influence in Regression, ch. 2). The figure names its scales and units and puts every
coloured artist in a legend.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from comparo import phylo
from comparo.fitting.multiple import design, fit_design
from comparo.report.added_variable import added_variable_data, added_variable_plot


@pytest.fixture
def table():
    rng = np.random.default_rng(3)
    n = 40
    la, lb = rng.normal(size=(2, n))
    lb = 0.5 * la + lb  # correlated: the panels differ from the raw scatter
    clade = rng.choice(["A", "B"], size=n)
    ly = 0.5 - 0.3 * la + 0.4 * lb + 0.2 * (clade == "B") + 0.1 * rng.normal(size=n)
    return pd.DataFrame(
        {"taxon": [f"t{i}" for i in range(n)], "mass": 10**la, "temp": 10**lb,
         "clade": clade, "freq": 10**ly}
    )  # fmt: skip


def test_slopes_are_the_ols_coefficients_and_residuals_the_models(table):
    d = design(table, "freq", ["mass", "temp"], factor="clade")
    fit = fit_design(d, "freq", ["mass", "temp"])
    X = pd.get_dummies(table["clade"], drop_first=True, dtype=float)
    X = sm.add_constant(pd.concat([np.log10(table[["mass", "temp"]]), X], axis=1))
    ref = sm.OLS(np.log10(table["freq"]), X).fit()
    for pan in added_variable_data(d, fit):
        assert pan["slope"] == pytest.approx(ref.params[pan["term"]], rel=1e-10)
        assert pan["y"] - pan["slope"] * pan["x"] == pytest.approx(ref.resid.to_numpy(), abs=1e-12)


def _dense_cov(newick: str) -> tuple[list[str], np.ndarray]:
    """Brownian-motion covariance (shared path from the root) from dendropy's distances."""
    import dendropy

    tree = dendropy.Tree.get(data=newick, schema="newick", rooting="force-rooted")
    pdm = tree.phylogenetic_distance_matrix()
    leaves = list(tree.leaf_node_iter())
    depth = [nd.distance_from_root() for nd in leaves]
    C = np.array(
        [
            [
                depth[i] if i == j else 0.5 * (depth[i] + depth[j] - pdm.patristic_distance(
                    a.taxon, b.taxon))
                for j, b in enumerate(leaves)
            ]
            for i, a in enumerate(leaves)
        ]
    )  # fmt: skip
    return [nd.taxon.label for nd in leaves], C


def test_pgls_slopes_are_the_gls_coefficients(table):
    nw = phylo.random_newick(len(table), 8, ultrametric=True)
    names, C = _dense_cov(nw)
    t = table.assign(taxon=names)
    d = design(t, "freq", ["mass", "temp"], tree=nw)
    fit = fit_design(d, "freq", ["mass", "temp"], method="pgls", lambda_=0.7)
    C = 0.7 * C + 0.3 * np.diag(np.diag(C))  # Pagel's lambda on the off-diagonal
    X = sm.add_constant(np.log10(t[["mass", "temp"]]))
    ref = sm.GLS(np.log10(t["freq"]), X, sigma=C).fit()
    for pan in added_variable_data(d, fit):
        assert pan["whitened"] and pan["slope"] == pytest.approx(ref.params[pan["term"]], rel=1e-8)


def test_figure_one_panel_per_predictor_units_and_legends(table):
    d = design(table, "freq", ["mass", "temp"], factor="clade")
    fit = fit_design(d, "freq", ["mass", "temp"])
    fig = added_variable_plot(d, fit, labels={"mass": "Body mass (kg)", "freq": "Frequency (Hz)"})
    axes = fig.get_axes()
    assert len(axes) == 2
    assert "residual of\nlog10 Body mass (kg)" in axes[0].get_xlabel()
    assert "residual of\nlog10 Frequency (Hz)" in axes[0].get_ylabel()
    assert "temp (unit as in the table)" in axes[1].get_xlabel()
    for ax in axes:
        texts = [t.get_text() for t in ax.get_legend().get_texts()]
        assert texts[0] == "taxa" and texts[1].startswith("slope = coefficient")
        assert len(ax.get_lines()) + len(ax.collections) == len(texts)
