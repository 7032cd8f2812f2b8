"""The check of observed values against what relatives on the tree predict
(comparo.phylo.outliers): its leave-one-out z against a dense GLS refit written here, its
false alarms on clean simulated Brownian-motion data, a planted unit slip found with its
obs_id, and how audit and check show it.

Sources: the BLUP with an unknown mean estimated by GLS, Goldberger AS (1962) JASA
57:369-375; Pagel's lambda C(lambda) = lambda·C + (1 - lambda)·diag(C), Pagel M (1999)
Nature 401:877-884; the externally studentised residual (rate from the other n - 1
values) and its t(n - 2) distribution, Belsley, Kuh & Welsch (1980) Regression
diagnostics, ch. 2; the Bonferroni bound on the expected number of false alarms,
alpha per quantity (common practice).
"""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from support import run_main

import comparo
from comparo.base.quantiles import t_quantile
from comparo.phylo import random_newick
from comparo.phylo.flat import flat
from comparo.phylo.outliers import ALPHA, loo_z, threshold
from comparo.phylo.trees import as_topo


def _bm(newick: str, seed: int, sd: float = 0.3, missing: float = 0.0):
    """BM values (log10 scale, root 1.0) on the tree, simulated densely from C; a share
    *missing* of tips without a value. Returns (C, tips, y with NaN)."""
    ft = flat(as_topo(newick), None)
    C = ft.covariance()
    rng = np.random.default_rng(seed)
    y = 1.0 + sd * (np.linalg.cholesky(C + 1e-12 * np.eye(ft.n_tips)) @ rng.normal(size=ft.n_tips))
    y[rng.random(ft.n_tips) < missing] = np.nan
    return C, list(ft.tips), y


def _dense_loo_z(C: np.ndarray, y: np.ndarray, lam: float) -> np.ndarray:
    """For each observed tip: refit GLS on the other observed tips with V = C(lambda)
    (mean by GLS, sigma² by REML with n - 2 df), predict the tip by the Goldberger BLUP,
    z = (y - prediction) / (sigma · sqrt(prediction variance for a unit rate))."""
    V = lam * C + (1.0 - lam) * np.diag(np.diag(C))
    obs = np.flatnonzero(np.isfinite(y))
    z = []
    for i in obs:
        o = obs[obs != i]
        Vi = np.linalg.inv(V[np.ix_(o, o)])
        one = np.ones(len(o))
        p = one @ Vi @ one
        mu = one @ Vi @ y[o] / p
        r = y[o] - mu
        s2 = float(r @ Vi @ r) / (len(o) - 1)
        c = V[o, i]
        pred = mu + c @ Vi @ r
        var = V[i, i] - c @ Vi @ c + (1.0 - c @ Vi @ one) ** 2 / p
        z.append((y[i] - pred) / np.sqrt(s2 * var))
    return np.array(z)


@pytest.mark.parametrize(
    "n, seed, ultrametric, lam", [(40, 3, True, 1.0), (36, 4, False, 0.6), (44, 5, True, "ml")]
)
def test_z_equals_a_dense_refit_without_each_tip(n, seed, ultrametric, lam):
    """Dense refit per tip (Goldberger 1962 BLUP, REML rate of the others), lambda fixed at
    the value the check used."""
    nwk = random_newick(n, seed=seed, ultrametric=ultrametric)
    C, tips, y = _bm(nwk, seed + 10, missing=0.25)
    y[3] += 1.5  # one value far off, so the case-deletion identity is tested away from 0
    y[3] = y[3] if np.isfinite(y[3]) else 2.5
    r = loo_z(nwk, {t: v for t, v in zip(tips, y, strict=True) if np.isfinite(v)}, lam)
    order = [tips.index(t) for t in r["tips"]]
    assert order == sorted(order)  # observed tips in tree order
    dense = _dense_loo_z(C, y, r["lambda"])
    np.testing.assert_allclose(r["z"], dense, rtol=0, atol=1e-8)
    assert r["threshold"] == pytest.approx(t_quantile(r["n"] - 2, 1 - ALPHA / (2 * r["n"])))


def test_few_false_alarms_on_clean_simulated_data_of_300_taxa():
    """Clean BM on random trees of 300 tips (seeds 20261205 + k, 8 replicates, half
    ultrametric), lambda by ML. Under the model each z ~ t(n - 2) (lambda known), so the
    Bonferroni threshold gives ALPHA = 0.05 expected false flags per replicate, 0.4 over 8
    (these seeds give 3, one in each of the first three replicates); the bound of 4, a
    handful among 2400 clean values, is exceeded with probability < 1e-4 under the model
    (Poisson(0.4)), while a threshold of 3 would give about 7. Also the body of the
    distribution: about 5% of all |z| beyond the two-sided 95% t quantile (3.5% to 6.5%
    over 2400 values: more than 4 binomial SDs either side)."""
    flags, beyond, total = 0, 0, 0
    for k in range(8):
        nwk = random_newick(300, seed=20261205 + k, ultrametric=k % 2 == 0)
        _, tips, y = _bm(nwk, 20261205 + 100 + k)
        r = loo_z(nwk, dict(zip(tips, y, strict=True)), "ml")
        flags += int(np.sum(np.abs(r["z"]) > r["threshold"]))
        beyond += int(np.sum(np.abs(r["z"]) > t_quantile(r["n"] - 2, 0.975)))
        total += r["n"]
    assert flags <= 4
    assert 0.035 <= beyond / total <= 0.065


def test_threshold_is_the_bonferroni_t_quantile():
    """Against scipy.stats.t.ppf: t(n - 2) at 1 - 0.05/(2n); 3.81 for 300 taxa (the normal
    quantile would be 3.76; |z| > 4, a stricter rule of thumb, is common practice)."""
    stats = pytest.importorskip("scipy.stats")
    for n in (10, 60, 300):
        assert threshold(n) == pytest.approx(stats.t.ppf(1 - 0.05 / (2 * n), n - 2), rel=1e-10)
    assert 3.81 < threshold(300) < 3.82


HEADER = "obs_id,taxon,quantity,value,unit,uncertainty,uncertainty_kind,n,source_id,locator,basis"
SOURCES = "source_id,citation,year,doi\ns1,Simulated S. (2020) Simulated values,2020,\n"


def _dataset(folder, slip: bool = True, tree: bool = True):
    """A dataset of 60 taxa: body mass (g) simulated as BM on a random ultrametric tree,
    spread over about 3 decades, so that the group-median unit-slip rule (4 robust spreads
    from the median) cannot see a factor 1000. The mass of the taxon at the 40th percentile
    is typed in mg under the g header (x 1000); it has two rows (two obs_ids behind its
    per-taxon value)."""
    nwk = random_newick(60, seed=7, ultrametric=True)
    _, tips, y = _bm(nwk, 8, sd=0.45)
    slip_at = int(np.argsort(y)[24])

    def epithet(tip: str) -> str:  # t48 -> "simeh": a binomial, as check asks
        return "sim" + "".join(chr(ord("a") + int(d)) for d in tip[1:])

    nwk = re.sub(r"\bt\d+\b", lambda m: "Simulata_" + epithet(m.group(0)), nwk)
    rows = []
    for i, (t, v) in enumerate(zip(tips, y, strict=True)):
        name = "Simulata " + epithet(t)
        value = 10.0**v * (1000.0 if slip and i == slip_at else 1.0)
        rows.append(f"b{i},{name},body_mass,{value:.6g},g,,,,s1,Table 1,reported")
        if i == slip_at:
            rows.append(f"b{i}x,{name},body_mass,{value:.6g},g,,,,s1,Table 2,reported")
    folder.mkdir()
    (folder / "observations.csv").write_text(HEADER + "\n" + "\n".join(rows) + "\n")
    (folder / "sources.csv").write_text(SOURCES)
    if tree:
        (folder / "tree.nwk").write_text(nwk + "\n")
    return folder, "Simulata " + epithet(tips[slip_at]), f"b{slip_at}"


def test_a_planted_unit_slip_is_flagged_with_its_obs_ids(tmp_path):
    """A body mass x 1000 on one taxon: the audit lists it, one entry per obs_id behind its
    per-taxon value, and nothing else; the group-median unit-slip rule does not see it."""
    folder, name, oid = _dataset(tmp_path / "slip")
    aud = comparo.audit(comparo.load(folder))
    d = aud.to_dict()
    assert d["phylo_checked"] == ["body_mass"]
    assert {o["obs_id"] for o in d["phylo_outliers"]} == {oid, oid + "x"}
    assert all(
        o["taxon"] == name and o["quantity"] == "body_mass" and o["z"] > threshold(60)
        for o in d["phylo_outliers"]
    )
    assert not aud.unit_slips
    (f,) = aud.phylo_flagged
    lo, hi = f["range"]
    assert lo < f["predicted"] < hi and lo < f["value"] / 1000 < hi  # the true value fits
    assert name in aud.summary()
    clean = comparo.audit(comparo.load(_dataset(tmp_path / "clean", slip=False)[0]))
    assert clean.phylo_outliers == [] and clean.phylo_checked == ["body_mass"]


def test_check_warns_and_exits_0(tmp_path):
    folder, name, oid = _dataset(tmp_path / "slip")
    r = run_main("check", str(folder), "--format", "json")
    assert r.returncode == 0, r.stderr
    probs = [p for p in json.loads(r.stdout)["problems"] if p["rule"] == "phylo-outlier"]
    assert sorted(p["value"] for p in probs) == [oid, oid + "x"]
    assert {p["severity"] for p in probs} == {"warning"} and "unit slip" in probs[0]["hint"]
    assert "95% range" in probs[0]["message"] and name in probs[0]["message"]
    text = run_main("check", str(folder))
    assert text.returncode == 0 and "phylo-outlier" in text.stdout
    assert "2 warning(s)" in text.stdout  # nothing else to warn about in this dataset


def test_without_a_tree_the_list_is_empty_and_the_note_says_why(tmp_path):
    folder = _dataset(tmp_path / "notree", tree=False)[0]
    r = run_main("audit", str(folder), "--format", "json")
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    assert d["phylo_outliers"] == [] and d["phylo_checked"] == []
    assert "no tree" in d["phylo_note"]
