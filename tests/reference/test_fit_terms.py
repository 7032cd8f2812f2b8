"""The ``terms`` rows of a one-predictor fit against independent routes.

- OLS: statsmodels OLS on the log10 values (estimates, SEs, t, p, CIs).
- PGLS at a fixed lambda: statsmodels GLS with the dense Brownian-motion covariance C(lambda)
  built from dendropy's patristic distances, C_ij = (d_root,i + d_root,j - d_ij)/2.
- Huber (robust): statsmodels RLM with HuberT(1.345) standard errors; z and normal p.
- SMA: the method's own exact intervals, no SE/t/p (null).
"""

from __future__ import annotations

import json

import dendropy
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from support import FIT_JSON_KEYS, run_main

from comparo.fitting.scaling import fit
from comparo.phylo import random_newick


def _table(n: int, seed: int, names: list[str] | None = None) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    names = names or [f"t{i + 1}" for i in range(n)]
    lx = rng.uniform(0, 3, n)
    ly = 0.4 + 0.7 * lx + 0.15 * rng.normal(size=n)
    return pd.DataFrame({"taxon": names, "m": 10**lx, "f": 10**ly})


def _check(terms, res, level=0.95):
    assert [t["term"] for t in terms] == ["intercept", "m"]
    lo, hi = np.asarray(res.conf_int(1 - level)).T
    for i, t in enumerate(terms):
        assert t["estimate"] == pytest.approx(res.params[i], rel=1e-9)
        assert t["se"] == pytest.approx(res.bse[i], rel=1e-8)
        assert t["t"] == pytest.approx(res.tvalues[i], rel=1e-8)
        assert t["ci"] == pytest.approx([lo[i], hi[i]], rel=1e-9)


def test_ols_terms_match_statsmodels():
    """statsmodels OLS on log10 x and log10 y: estimate, se, t, p and the 90% CI."""
    t = _table(25, 3)
    r = fit(t, "m", "f", method="ols", ci=0.9)
    res = sm.OLS(np.log10(t.f.to_numpy()), sm.add_constant(np.log10(t.m.to_numpy()))).fit()
    d = r.to_dict()
    _check(d["terms"], res, 0.9)
    for i, term in enumerate(d["terms"]):
        assert term["p"] == pytest.approx(res.pvalues[i], rel=1e-6, abs=1e-300)
    assert d["terms"][1]["ci"] == d["slope_ci"] and d["terms"][0]["ci"] == d["intercept_ci"]


def test_pgls_terms_match_dense_gls():
    """statsmodels GLS with the dense C(lambda) from dendropy (lambda fixed at 0.6)."""
    nw = random_newick(40, 7, ultrametric=True)
    tree = dendropy.Tree.get(data=nw, schema="newick", rooting="force-rooted")
    pdm = tree.phylogenetic_distance_matrix()
    leaves = list(tree.leaf_node_iter())
    names = [nd.taxon.label for nd in leaves]
    depth = [nd.distance_from_root() for nd in leaves]
    n = len(names)
    C = np.array(
        [
            [
                0.5
                * (
                    depth[i]
                    + depth[j]
                    - (0.0 if i == j else pdm.patristic_distance(a.taxon, b.taxon))
                )
                for j, b in enumerate(leaves)
            ]
            for i, a in enumerate(leaves)
        ]
    )
    lam = 0.6
    V = lam * C + (1 - lam) * np.diag(np.diag(C))
    t = _table(n, 5, names)
    r = fit(t, "m", "f", method="pgls", tree=nw, lambda_=lam)
    res = sm.GLS(np.log10(t.f.to_numpy()), sm.add_constant(np.log10(t.m.to_numpy())), sigma=V).fit()
    terms = r.to_dict()["terms"]
    _check(terms, res)
    for i, term in enumerate(terms):
        assert term["p"] == pytest.approx(res.pvalues[i], rel=1e-6, abs=1e-300)


def test_robust_terms_are_huber_wald_z():
    """statsmodels RLM (HuberT 1.345, MAD scale): se; t holds z = estimate/se, p from the normal."""
    t = _table(30, 11)
    X, Y = np.log10(t.m.to_numpy()), np.log10(t.f.to_numpy())
    res = sm.RLM(Y, sm.add_constant(X), M=sm.robust.norms.HuberT(t=1.345)).fit()
    terms = fit(t, "m", "f", method="robust").to_dict()["terms"]
    for i, term in enumerate(terms):
        assert term["se"] == pytest.approx(res.bse[i], rel=1e-8)
        assert term["t"] == pytest.approx(res.params[i] / res.bse[i], rel=1e-8)
        assert term["p"] == pytest.approx(
            2 * stats.norm.sf(abs(res.params[i] / res.bse[i])), rel=1e-6, abs=1e-300
        )


def test_sma_terms_carry_the_methods_intervals_and_no_se():
    """SMA/MA intervals are not estimate +/- quantile x se: se, t and p are null."""
    t = _table(20, 2)
    d = fit(t, "m", "f", method="sma").to_dict()
    assert [x["ci"] for x in d["terms"]] == [d["intercept_ci"], d["slope_ci"]]
    assert all(x["se"] is None and x["t"] is None and x["p"] is None for x in d["terms"])


def test_cli_json_keeps_every_key_and_adds_terms(tmp_path):
    """One --x: the contract keys stay as they were, ``terms`` is added."""
    t = _table(15, 4)
    path = tmp_path / "t.csv"
    t.to_csv(path, index=False)
    p = run_main("fit", str(path), "--x", "m", "--y", "f", "--method", "ols", "--format", "json")
    assert p.returncode == 0, p.stderr
    d = json.loads(p.stdout)
    assert FIT_JSON_KEYS <= set(d)
    assert (
        d["x"] == "m" and d["terms"][1]["term"] == "m" and d["terms"][1]["estimate"] == d["slope"]
    )
