"""Multiple imputation in fits (comparo fit --impute) and the predictive draws behind it.

The draws are checked against the dense conditional covariance of the imputed tips written
here in numpy (Goldberger AS 1962, JASA 57:369-375: Σ_mm − Σ_mo Σ_oo⁻¹ Σ_om plus the GLS root
term), times the variance factor ν/(ν − 2) of Student's t with ν = n_o − 1 that the
scaled-inverse-chi-square draw of the rate gives (Gelman et al. 2013, Bayesian Data Analysis,
3rd ed., CRC, section 3.2, the marginal posterior predictive under a flat prior). The pooling
itself is checked by hand in tests/test_pooling.py."""

from __future__ import annotations

import json

import numpy as np
import pytest
from support import run_main

import comparo
from comparo.phylo import random_newick
from comparo.phylo.flat import flat
from comparo.phylo.trees import as_topo

HEADER = (
    "obs_id,taxon,quantity,value,unit,uncertainty,uncertainty_kind,n,source_id,locator,basis,"
    "inputs,proxy_taxon,temperature_c"
)
N_TIPS = 40


def _write(d, seed: int = 7):
    """A simulated dataset (fixed seed): correlated BM of log body mass and log frequency
    on a 40-tip random tree, about a quarter of body masses and a tenth of frequencies
    missing. Invented for the test, not real animals."""
    nwk = random_newick(N_TIPS, seed=seed, ultrametric=True)
    ft = flat(as_topo(nwk), None)
    rng = np.random.default_rng(seed)
    L = np.linalg.cholesky(np.array([[1.0, 0.8], [0.8, 1.0]]) * 0.3)
    X = np.zeros((ft.n_nodes, 2))
    for k in range(len(ft.bounds) - 3, -1, -1):
        a, b = int(ft.bounds[k]), int(ft.bounds[k + 1])
        X[a:b] = (
            X[ft.parent[a:b]]
            + (rng.normal(size=(b - a, 2)) @ L.T) * np.sqrt(ft.length[a:b])[:, None]
        )
    rows = [HEADER]
    for i, (t, (a, b)) in enumerate(zip(ft.tips, X[:N_TIPS], strict=True)):
        if rng.random() > 0.25:
            rows.append(f"o{i},{t},body_mass,{10 ** (a + 1):.8g},mg,,,,s1,T1,reported,,,")
        if rng.random() > 0.1:
            f = 10 ** (2 + 0.4 * a + 0.3 * b)
            rows.append(f"o{i}f,{t},frequency_observed,{f:.8g},Hz,,,,s1,T1,reported,,,25")
    d.mkdir()
    (d / "tree.nwk").write_text(nwk + "\n", encoding="utf-8")
    (d / "observations.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    (d / "sources.csv").write_text(
        "source_id,citation,year,doi\ns1,Invented A. (2001) Simulated,2001,10.1000/abc\n",
        encoding="utf-8",
    )
    return d


@pytest.fixture
def sim(tmp_path):
    return _write(tmp_path / "sim")


def test_draws_have_the_dense_conditional_covariance(sim):
    """4,000 joint draws of the imputed body masses (λ = 1): their mean is the BLUP and
    their covariance the dense conditional covariance × ν/(ν − 2). Tolerances: the mean
    within 5 standard errors of a mean of 4,000 draws; each covariance entry within
    0.12 × the largest variance (the sampling SD of a covariance from 4,000 draws of a
    t-like variable is below 0.04 of it)."""
    imp = comparo.impute(sim, "body_mass", lambda_=1.0)
    from comparo.phylo.completion import predictive_draws

    D = predictive_draws(imp, 4000, seed=11)
    miss = ~imp.observed
    assert D.shape == (4000, int(miss.sum()))
    sd = D.std(axis=0)
    assert np.all(np.abs(D.mean(axis=0) - imp.log_value[miss]) < 5 * sd / np.sqrt(4000))
    ft = flat(as_topo((sim / "tree.nwk").read_text()), None)
    C = ft.covariance()
    idx = ft.index([t for t in imp.taxa])
    C = C[np.ix_(idx, idx)]
    o, mm = imp.observed, miss
    y = imp.log_value
    Ci = np.linalg.inv(C[np.ix_(o, o)])
    one = np.ones(int(o.sum()))
    A = one @ Ci @ one
    mu = one @ Ci @ y[o] / A
    s2 = (y[o] - mu) @ Ci @ (y[o] - mu) / (o.sum() - 1)
    S = C[np.ix_(mm, o)]
    g = 1 - S @ Ci @ one
    cond = C[np.ix_(mm, mm)] - S @ Ci @ S.T + np.outer(g, g) / A
    nu = o.sum() - 1
    expected = s2 * cond * nu / (nu - 2)
    got = np.cov(D, rowvar=False)
    assert np.max(np.abs(got - expected)) < 0.12 * np.max(np.diag(expected))
    np.testing.assert_allclose(np.diag(s2 * cond), imp.log_se[mm] ** 2, rtol=1e-8)


def test_fit_with_impute_keeps_the_fit_and_adds_the_imputation(sim):
    """The JSON of `fit --impute` is that of `fit` plus "imputation"; the slope without
    imputed taxa is the plain fit's; the API answers as the CLI; the run is repeatable."""
    args = ["fit", str(sim), "--x", "body_mass", "--y", "frequency_observed", "--method", "ols"]
    plain = json.loads(run_main(*args, "--format", "json").stdout)
    r = run_main(*args, "--impute", "--impute-m", "8", "--format", "json")
    assert r.returncode == 0, r.stderr
    d = json.loads(r.stdout)
    assert list(d)[:-1] == list(plain) and list(d)[-1] == "imputation"
    assert {k: v for k, v in d.items() if k != "imputation"} == plain
    b = d["imputation"]
    assert b["m"] == 8 and b["quantities"] == ["body_mass", "frequency_observed"]
    assert b["slope_without_imputed"] == plain["slope"]
    assert b["n_without_imputed"] == plain["n"]
    assert b["n"] == plain["n"] + b["n_imputed"] and b["n_imputed"] > 0
    assert b["df_rule"] == "barnard-rubin-1999" and 0 < b["df"] <= b["n"] - 2
    assert b["slope_ci"][0] < b["slope"] < b["slope_ci"][1]
    assert 0 <= b["missing_information"] < 1
    assert set(b["cross_validation"]) == {"body_mass", "frequency_observed"}
    assert (
        json.loads(run_main(*args, "--impute", "--impute-m", "8", "--format", "json").stdout) == d
    )
    from comparo.fitting.imputed import fit_with_imputation

    ds = comparo.load(sim)
    api = fit_with_imputation(
        ds, comparo.tabulate(ds), "body_mass", "frequency_observed", "ols", m=8, seed=20240601
    )
    assert json.loads(json.dumps(api.to_dict(), default=float)) == d
    text = run_main(*args, "--impute", "--impute-m", "8").stdout
    assert "multiple imputation, m = 8" in text and "without imputed taxa" in text


def test_impute_table_in_comparo_toml(sim):
    """[impute] in comparo.toml asks for it (fit names an imputed quantity); bad entries
    are refused with exit 2 naming comparo.toml and the key."""
    args = ["fit", str(sim), "--x", "body_mass", "--y", "frequency_observed", "--format", "json"]
    (sim / "comparo.toml").write_text(
        '[impute]\nquantities = ["body_mass"]\nm = 5\nlambda = 1\n', encoding="utf-8"
    )
    d = json.loads(run_main(*args).stdout)
    assert d["imputation"]["m"] == 5 and d["imputation"]["quantities"] == ["body_mass"]
    assert d["imputation"]["lambda"] == 1.0
    assert d["imputation"]["n_imputed_by_quantity"] == {"body_mass": d["imputation"]["n_imputed"]}
    (sim / "comparo.toml").write_text(
        '[impute]\nquantities = ["nonesuch"]\nm = 1\nlambda = 2\n', encoding="utf-8"
    )
    r = run_main(*args)
    assert r.returncode == 2 and "comparo.toml" in r.stderr, r.stderr
    assert "nonesuch" in r.stderr


def test_impute_refuses_a_plain_csv(tmp_path):
    csv = tmp_path / "t.csv"
    csv.write_text("taxon,a,b\nx,1,2\ny,2,3\nz,3,5\nw,4,4\n", encoding="utf-8")
    r = run_main("fit", str(csv), "--x", "a", "--y", "b", "--impute")
    assert r.returncode == 2 and "dataset folder" in r.stderr


def _lattice(d):
    """The simulated dataset with body masses renamed lattice spacings (nm, ~10^1.5): an
    input of the derived filament spacing."""
    _write(d)
    path = d / "observations.csv"
    text = path.read_text(encoding="utf-8").replace(",body_mass,", ",lattice_spacing_d10,")
    lines = [text.splitlines()[0]]
    for line in text.splitlines()[1:]:
        parts = line.split(",")
        if parts[2] == "lattice_spacing_d10":
            parts[3] = f"{float(parts[3]) ** 0.1 * 30:.8g}"
            parts[4] = "nm"
        lines.append(",".join(parts))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return d


def test_table_and_derive_with_impute_mark_and_propagate(tmp_path):
    """table --impute Q: imputed rows carry basis 'imputed', a lineage naming the method and
    the closest observed relatives, and the prediction SE as uncertainty (value·ln 10·SE of
    log10, first order; the SE is the one `comparo impute` reports); without --impute the
    table is what it was. derive --impute: filament spacing, proportional to d10, inherits
    the basis 'imputed' and the same relative uncertainty (first-order propagation of a
    proportional relation: u_y/y = u_x/x, any textbook on error propagation, e.g. Taylor JR
    1997, An introduction to error analysis, 2nd ed., University Science Books, §3.8)."""
    import pandas as pd

    d = _lattice(tmp_path / "lat")
    plain = run_main("table", str(d)).stdout
    r = run_main("table", str(d), "--impute", "lattice_spacing_d10")
    assert r.returncode == 0, r.stderr
    import io

    t = pd.read_csv(io.StringIO(r.stdout))
    imp = comparo.impute(d, "lattice_spacing_d10")
    rows = t[t["lattice_spacing_d10_basis"] == "imputed"]
    assert len(rows) == imp.n_imputed > 0
    se = dict(zip(imp.taxa, imp.log_se, strict=True))
    for _, row in rows.iterrows():
        assert row["lattice_spacing_d10_u"] == pytest.approx(
            row["lattice_spacing_d10"] * np.log(10) * se[row["taxon"]], rel=1e-6
        )
        assert row["lattice_spacing_d10_lineage"].startswith("imputed: phylogenetic BLUP")
        assert "closest observed relatives: " in row["lattice_spacing_d10_lineage"]
        assert row["lattice_spacing_d10_n"] == 0
    observed = t[t["lattice_spacing_d10_basis"] == "reported"]
    assert observed["lattice_spacing_d10_lineage"].isna().all()
    assert run_main("table", str(d)).stdout == plain  # nothing enters unless asked
    assert "imputed" not in plain
    r = run_main("derive", str(d), "--impute", "lattice_spacing_d10")
    assert r.returncode == 0, r.stderr
    dv = pd.read_csv(io.StringIO(r.stdout))
    rows = dv[dv["lattice_spacing_d10_basis"] == "imputed"]
    assert (rows["filament_spacing_basis"] == "imputed").all()
    np.testing.assert_allclose(
        rows["filament_spacing_u"] / rows["filament_spacing"],
        rows["lattice_spacing_d10_u"] / rows["lattice_spacing_d10"],
        rtol=1e-9,
    )
    (d / "comparo.toml").write_text(
        '[impute]\nquantities = ["lattice_spacing_d10"]\n', encoding="utf-8"
    )
    assert (
        run_main("table", str(d)).stdout
        == run_main("table", str(d), "--impute", "lattice_spacing_d10").stdout
    )
    r = run_main("table", str(tmp_path / "lat"), "--impute")
    assert r.returncode == 0
    (d / "comparo.toml").unlink()
    r = run_main("table", str(d), "--impute")
    assert r.returncode == 2 and "names no quantity" in r.stderr


def test_audit_counts_imputed_values_and_check_reports_bad_settings(sim):
    """audit: per quantity of [impute], observed and imputed counts and the leave-one-out
    figures, equal to those of `comparo impute`; an empty dict without [impute]. check: a
    bad [impute] is an error naming comparo.toml and the key."""
    d = json.loads(run_main("audit", str(sim), "--format", "json").stdout)
    assert d["imputed"] == {}
    (sim / "comparo.toml").write_text('[impute]\nquantities = ["body_mass"]\n', encoding="utf-8")
    d = json.loads(run_main("audit", str(sim), "--format", "json").stdout)
    imp = comparo.impute(sim, "body_mass")
    got = d["imputed"]["body_mass"]
    assert (got["n_observed"], got["n_imputed"]) == (imp.n_observed, imp.n_imputed)
    assert got["rmse_log"] == pytest.approx(imp.rmse_log)
    assert "imputed values per quantity" in run_main("audit", str(sim)).stdout
    (sim / "comparo.toml").write_text('[impute]\nquantities = ["body_mass"]\nm = 1\n', "utf-8")
    r = run_main("check", str(sim), "--format", "json")
    probs = [p for p in json.loads(r.stdout)["problems"] if p["rule"] == "impute-settings"]
    assert [(p["file"], p["column"]) for p in probs] == [("comparo.toml", "impute.m")]
    assert r.returncode == 2
