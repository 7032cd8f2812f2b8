"""Behaviour of comparo.fitting.source_sensitivity (comparo.sensitivity): source influence, basis
steps, jackknife, Monte Carlo."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from support import DEMO, run_main, write_dataset

from comparo.fitting import fit
from comparo.fitting.slope_spread import jackknife_se, lognormal_draws, measurement_error_mc
from comparo.fitting.source_sensitivity import sensitivity, with_sensitivity
from comparo.validation.dataset import load

TRUE_SLOPE = -0.25


def _compilation(folder, *, biased: bool, seed: int = 7, n_taxa: int = 48, n_src: int = 8):
    """Invented compilation: frequency = 30 Hz (M/g)^-0.25 with 5% scatter, values spread over
    n_src sources; with ``biased`` one source (SRC1) reports frequencies that scale as M^-0.45
    (a mass-dependent bias, 2.5-fold too high at 1 mg), steepening the slope."""
    rng = np.random.default_rng(seed)
    logm = np.linspace(-3, 3, n_taxa)
    rows, src_rows = [], ["source_id,citation,year,doi"]
    for s in range(n_src):
        src_rows.append(f"SRC{s},Invented source {s} (2000) for tests,2000,")
    for i, lm in enumerate(logm):
        taxon = f"Fictus sp{chr(97 + i // 26)}{chr(97 + i % 26)}"
        mass = 10**lm
        src = f"SRC{i % n_src}"
        f = 30 * mass**TRUE_SLOPE * math.exp(rng.normal(0, 0.05))
        if biased and src == "SRC1":
            f *= 10 ** (-0.2 * lm)
        rows.append(
            f"m{i},{taxon},body_mass,{mass:.6g},g,{0.02 * mass:.3g},sd,5,{src},Table 1,reported,,,"
        )
        rows.append(
            f"f{i},{taxon},frequency_observed,{f:.6g},Hz,{0.03 * f:.3g},sd,5,{src},Table 2,"
            f"{'digitized' if i % 5 == 0 else 'reported'},,,25"
        )
    write_dataset(folder, rows, sources="\n".join(src_rows) + "\n")
    return load(folder)


@pytest.fixture(scope="module")
def biased(tmp_path_factory):
    ds = _compilation(tmp_path_factory.mktemp("biased"), biased=True)
    return sensitivity(ds, "body_mass", "frequency_observed", "ols", against=TRUE_SLOPE, mc=200)


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    ds = _compilation(tmp_path_factory.mktemp("clean"), biased=False)
    return sensitivity(ds, "body_mass", "frequency_observed", "ols", against=TRUE_SLOPE, mc=200)


def test_biased_source_ranked_first_and_flips_test(biased):
    """The planted source moves the slope most and its removal reverses the test of slope =
    -0.25."""
    top = biased.leave_one_source_out[0]
    assert top["source_id"] == "SRC1"
    assert biased.test["p"] < 0.05  # the biased compilation rejects the true exponent
    assert top["flips"] and top["p"] >= 0.05
    assert abs(top["shift_se"]) >= 1
    assert not any(r["flips"] for r in biased.leave_one_source_out[1:])
    assert "SRC1" in biased.verdict and "flips" in biased.verdict


def test_clean_dataset_flags_no_source(clean):
    assert clean.test["p"] >= 0.05
    assert len(clean.leave_one_source_out) == 8
    assert all(abs(r["shift_se"]) < 1 and not r["flips"] for r in clean.leave_one_source_out)
    assert clean.verdict.startswith("no single source moves the slope by 1 SE or more")


def test_by_basis_steps(clean):
    steps = clean.by_basis
    assert [s["bases"] for s in steps] == [["reported"], ["reported", "computed", "digitized"]]
    assert steps[0]["n"] < steps[1]["n"] == 48
    assert steps[1]["slope"] == pytest.approx(clean.slope)


def test_jackknife_se_matches_analytic_ols():
    """Homoscedastic simulated data, n = 200, seed 11: the jackknife SE of the OLS slope
    agrees with the analytic se(b) = s_e/(s_x sqrt(n-1)) within 15% (both estimate the
    same SE; Efron 1982, ch. 3; tolerance: the jackknife SE's own sampling spread at
    n = 200 is about 5-10%, common practice)."""
    rng = np.random.default_rng(11)
    x = rng.uniform(0, 3, 200)
    y = 1 + 0.7 * x + rng.normal(0, 0.3, 200)
    t = pd.DataFrame({"taxon": [f"t{i}" for i in range(200)], "x": x, "y": y})
    s = sensitivity(t, "x", "y", "ols", log="none", mc=0)
    j = s.jackknife_se
    import statsmodels.api as sm

    se_sm = sm.OLS(y, sm.add_constant(x)).fit().bse[1]
    assert j["slope_analytic"] == pytest.approx(se_sm, rel=1e-9)
    assert j["slope_jackknife"] == pytest.approx(se_sm, rel=0.15)
    assert s.leave_one_source_out is None and s.by_basis is None
    assert "plain table" in s.verdict


def test_jackknife_formula_hand_case():
    """Leave-one-out estimates 1, 2, 3, 4: mean 2.5, sum of squares 5, SE = sqrt(3/4 * 5)
    = 1.9365 (computed by hand from Efron 1982, eq. 2.2); for the mean of data the jackknife
    SE equals s/sqrt(n) exactly (Efron 1982, ch. 2)."""
    assert jackknife_se(np.array([1.0, 2.0, 3.0, 4.0])) == pytest.approx(math.sqrt(0.75 * 5))
    d = np.array([2.0, 4.0, 9.0, 1.0, 5.0])
    loo = (d.sum() - d) / (len(d) - 1)
    assert jackknife_se(loo) == pytest.approx(d.std(ddof=1) / math.sqrt(len(d)))


def test_taxon_jackknife_loo_slopes_by_hand():
    """The moment-based leave-one-out slopes equal refits without each point (numpy polyfit)."""
    rng = np.random.default_rng(3)
    x = rng.uniform(0, 2, 9)
    y = 2 * x + rng.normal(0, 0.2, 9)
    t = pd.DataFrame({"taxon": [f"t{i}" for i in range(9)], "x": x, "y": y})
    s = sensitivity(t, "x", "y", "ols", log="none", mc=0)
    loo = [np.polyfit(np.delete(x, i), np.delete(y, i), 1)[0] for i in range(9)]
    assert s.jackknife_se["slope_jackknife"] == pytest.approx(
        jackknife_se(np.array(loo)), rel=1e-10
    )


def _line_table(n=200, u_x=0.0, u_y=0.0):
    x = 10 ** np.linspace(0, 2, n)
    y = 3 * x**0.5
    return pd.DataFrame(
        {"taxon": [f"t{i}" for i in range(n)], "x": x, "x_u": u_x * x, "y": y, "y_u": u_y * y}
    )


@pytest.mark.parametrize("method", ["ols", "sma", "ma"])
def test_mc_zero_uncertainty_reproduces_fit(method):
    t = _line_table()
    t["y"] = t["y"] * np.exp(np.random.default_rng(1).normal(0, 0.05, len(t)))
    r = fit(t, "x", "y", method)
    me = measurement_error_mc(t, r, log="10", mc=50, seed=1)
    assert me["spread"] == 0.0
    assert me["slope_mean"] == pytest.approx(r.slope, rel=1e-12)
    assert me["total_se"] == pytest.approx(me["sampling_se"])
    assert me["fixed_x"] == me["fixed_y"] == len(t)


def test_mc_attenuation_matches_reliability_ratio():
    """Classical error in x attenuates the OLS slope by the reliability ratio
    lambda = var(x)/(var(x) + var(u)) (Fuller 1987, Measurement Error Models, ch. 1; section from
    memory). A constant relative uncertainty c is, on log10 axes, an additive error of variance
    ln(1 + c^2)/ln(10)^2. Tolerance: 4 Monte Carlo standard errors plus the O(1/n) bias
    of the ratio estimator."""
    c = 0.4
    t = _line_table(n=200, u_x=c)
    r = fit(t, "x", "y", "ols")
    me = measurement_error_mc(t, r, log="10", mc=2000, seed=5)
    var_x = np.var(np.log10(t["x"]), ddof=1)
    var_u = math.log1p(c * c) / math.log(10) ** 2
    expected = 0.5 * var_x / (var_x + var_u)
    assert abs(me["slope_mean"] - expected) < 4 * me["spread"] / math.sqrt(2000) + 0.01 * expected
    assert expected < 0.95 * 0.5  # the check has power: attenuation is visible


def test_lognormal_draws_moments():
    """Draws keep the stated mean and standard deviation (log-normal moment matching, as stated in
    JCGM 101:2008; clause not checked, from memory)."""
    d = lognormal_draws(
        np.array([10.0, 0.0]), np.array([3.0, 2.0]), 200_000, np.random.default_rng(2)
    )
    assert d[:, 0].mean() == pytest.approx(10, rel=0.01)
    assert d[:, 0].std() == pytest.approx(3, rel=0.02)
    assert (d[:, 0] > 0).all()
    assert d[:, 1].std() == pytest.approx(2, rel=0.02)  # zero value: normal


def test_seed_reproduces(tmp_path):
    t = _line_table(n=30, u_x=0.1, u_y=0.1)
    a = sensitivity(t, "x", "y", "sma", mc=100, seed=9).to_dict()
    b = sensitivity(t, "x", "y", "sma", mc=100, seed=9).to_dict()
    c = sensitivity(t, "x", "y", "sma", mc=100, seed=10).to_dict()
    assert a == b
    assert a["measurement_error"]["spread"] != c["measurement_error"]["spread"]


def test_json_keys_match_contract(biased):
    d = json.loads(json.dumps(biased.to_dict()))
    assert set(d) == {
        "leave_one_source_out",
        "by_basis",
        "jackknife_se",
        "measurement_error",
        "verdict",
    }
    for r in d["leave_one_source_out"]:
        assert {"source_id", "slope", "slope_ci", "p", "shift_se"} <= set(r)
    shifts = [abs(r["shift_se"]) for r in d["leave_one_source_out"]]
    assert shifts == sorted(shifts, reverse=True)
    assert isinstance(d["verdict"], str)
    frame = biased.to_frame()
    assert len(frame) == len(d["leave_one_source_out"]) + len(d["by_basis"])
    assert "verdict" in biased.summary()


def test_with_sensitivity_fills_fit_result(clean, tmp_path):
    t = _line_table(n=10)
    r = with_sensitivity(fit(t, "x", "y", "ols"), clean)
    assert r.to_dict()["sensitivity"]["verdict"] == clean.verdict


def _planted_demo_sources(x: str, y: str) -> set[str]:
    """Sources of the demo rows the generator marks as planted faults (obs_id DEMO-...) on the
    fitted quantities."""
    obs = pd.read_csv(DEMO / "observations.csv", dtype=str)
    planted = obs[obs["obs_id"].str.startswith("DEMO-") & obs["quantity"].isin([x, y])]
    return set(planted["source_id"])


def test_cli_sensitivity_on_demo():
    """Done-when check: on the demo, ``fit --method sma --sensitivity`` names a source carrying a
    planted fault (any row the generator marks DEMO-... on mass or frequency: the conflicting and
    the duplicated values) among the three most influential sources; 1000 Monte Carlo draws by
    default."""
    planted = _planted_demo_sources("body_mass", "frequency_observed")
    assert planted
    out = run_main(
        "fit",
        str(DEMO),
        "--x",
        "body_mass",
        "--y",
        "frequency_observed",
        "--method",
        "sma",
        "--sensitivity",
        "--format",
        "json",
    )
    assert out.returncode == 0, out.stderr
    d = json.loads(out.stdout)["sensitivity"]
    assert len(d["leave_one_source_out"]) >= 2
    assert d["measurement_error"]["draws"] == 1000
    top = [r["source_id"] for r in d["leave_one_source_out"][:3]]
    assert planted & set(top), (planted, top)


def test_loso_matches_full_rebuild(tmp_path):
    """The per-taxon splice used for speed gives the same slope as rebuilding the whole table."""
    import dataclasses

    from comparo.curation.aggregation import per_taxon
    from comparo.curation.harmonise import harmonise

    ds = _compilation(tmp_path / "d", biased=True)
    s = sensitivity(ds, "body_mass", "frequency_observed", "sma", mc=0)
    h = harmonise(ds)
    rows = h.rows.copy()
    rows.loc[rows["source_id"] == "SRC3", "status"] = "excluded"
    full = fit(
        per_taxon(ds, harmonised=dataclasses.replace(h, rows=rows)),
        "body_mass",
        "frequency_observed",
        "sma",
    )
    rec = next(r for r in s.leave_one_source_out if r["source_id"] == "SRC3")
    assert rec["slope"] == pytest.approx(full.slope, rel=1e-12)
    assert rec["n"] == full.n


# --------------------------------------------------------------- every fit method, groups, layering


@pytest.mark.parametrize("method", ["robust", "lts"])
def test_mc_zero_uncertainty_reproduces_fit_robust_and_lts(method):
    """Zero uncertainties: every draw is the data, so the spread is 0 and the mean slope is the
    plain fit's."""
    t = _line_table(n=60)
    t["y"] = t["y"] * np.exp(np.random.default_rng(1).normal(0, 0.05, len(t)))
    r = fit(t, "x", "y", method)
    me = measurement_error_mc(t, r, log="10", mc=50, seed=1)
    assert me["spread"] == 0.0
    assert me["slope_mean"] == pytest.approx(r.slope, rel=1e-7)  # IRLS stops at a 1e-10 step


def test_huber_slopes_match_statsmodels_rlm():
    """The vectorised IRLS gives the slope of statsmodels RLM (HuberT, MAD scale) on each data
    set."""
    from comparo.fitting import huber_line
    from comparo.fitting.robust import huber_slopes

    rng = np.random.default_rng(6)
    X = rng.uniform(0, 2, (6, 40))
    Y = 0.4 * X + rng.standard_t(3, (6, 40)) * 0.1
    expected = [huber_line(X[i], Y[i]).slope for i in range(6)]
    assert huber_slopes(X, Y) == pytest.approx(expected, rel=1e-7)


@pytest.mark.parametrize("method", ["robust", "lts"])
def test_mc_robust_and_lts_attenuate_like_ols_on_clean_data(method):
    """Without outliers the robust and LTS lines estimate the OLS line, so classical x-error
    attenuates them by the same reliability ratio (Fuller 1987, ch. 1; from memory); looser
    tolerance for the capped LTS draws."""
    c = 0.4
    t = _line_table(n=200 if method == "robust" else 60, u_x=c)  # LTS refits one draw at a time
    t["y"] = t["y"] * np.exp(np.random.default_rng(2).normal(0, 0.02, len(t)))
    r = fit(t, "x", "y", method)
    me = measurement_error_mc(t, r, log="10", mc=1000, seed=5)
    var_x = np.var(np.log10(t["x"]), ddof=1)
    expected = r.slope * var_x / (var_x + math.log1p(c * c) / math.log(10) ** 2)
    draws = me["draws"]
    assert abs(me["slope_mean"] - expected) < 4 * me["spread"] / math.sqrt(draws) + 0.02 * expected
    if method == "lts":
        assert draws == 200 and me["draws_asked"] == 1000 and "200 of the 1000 draws" in me["note"]
    else:
        assert draws == 1000 and me["note"] is None


def test_mc_and_jackknife_pgls_on_demo_say_lambda_is_held():
    s = sensitivity(
        load(DEMO), "body_mass", "frequency_observed", "pgls", tree=str(DEMO / "tree.nwk"), mc=20
    )
    me = s.measurement_error
    assert me["spread"] is not None and me["spread"] > 0 and me["draws"] == 20
    assert "lambda at the full-data estimate" in me["note"]
    j = s.jackknife_se
    assert j["n"] > 3 and 0.5 < j["ratio"] < 2  # same order as the analytic SE
    assert (
        "lambda at the full-data estimate" in j["note"]
        and "lambda at the full-data estimate" in s.summary()
    )


def test_sensitivity_by_group_restricts_to_the_group(biased, tmp_path):
    """Per-group sensitivity equals the sensitivity of the group's taxa on their own."""
    from comparo.fitting.source_sensitivity import sensitivity_by_group

    t = _line_table(n=40, u_x=0.1, u_y=0.1)
    t["grp"] = np.where(np.arange(40) < 20, "a", "b")
    t.loc[[0, 1, 2], "grp"] = None
    g = sensitivity_by_group(t, "x", "y", "ols", by="grp", mc=30, seed=3)
    alone = sensitivity(t[t["grp"] == "b"], "x", "y", "ols", mc=30, seed=3)
    assert set(g) == {"a", "b"} and g["b"].to_dict() == alone.to_dict()
    tiny = t.assign(grp=["c"] * 2 + ["d"] * 38)
    g2 = sensitivity_by_group(tiny, "x", "y", "ols", by="grp", mc=0)
    assert isinstance(g2["c"], str) and "at least 3 usable points" in g2["c"]
    d = with_sensitivity(fit(t, "x", "y", "ols"), alone, by_group=g2).to_dict()["sensitivity"]
    assert (
        set(d["by_group"]) == {"c", "d"}
        and "note" in d["by_group"]["c"]
        and "verdict" in d["by_group"]["d"]
    )


def test_sensitivity_by_group_dataset_uses_only_group_rows(tmp_path):
    """On a dataset, a group's leave-one-source-out refits use only that group's taxa."""
    from comparo.fitting.source_sensitivity import sensitivity_by_group

    ds = _compilation(tmp_path / "d", biased=True)
    table = __import__("comparo").tabulate(ds)
    half = set(table["taxon"][:24])
    g = sensitivity(ds, "body_mass", "frequency_observed", "ols", mc=0, taxa=sorted(half))
    assert g.jackknife_se["n"] == 24 and all(r["n"] <= 24 for r in g.leave_one_source_out)
    with pytest.raises(Exception, match="not in the per-taxon table"):
        sensitivity_by_group(ds, "body_mass", "frequency_observed", "ols", by="nope", mc=0)


def test_cli_sensitivity_by_group(tmp_path, capsys):
    from comparo.cli.main import main

    t = _line_table(n=40, u_x=0.1, u_y=0.1)
    t["grp"] = np.where(np.arange(40) < 20, "a", "b")
    p = tmp_path / "g.csv"
    t.to_csv(p, index=False)
    assert (
        main(
            [
                "fit",
                str(p),
                "--x",
                "x",
                "--y",
                "y",
                "--method",
                "ols",
                "--by",
                "grp",
                "--sensitivity",
                "--mc",
                "50",
                "--format",
                "json",
            ]
        )
        == 0
    )
    d = json.loads(capsys.readouterr().out)
    assert (
        set(d["sensitivity"]["by_group"]) == {"a", "b"}
        and d["sensitivity"]["measurement_error"]["draws"] == 50
    )
    assert (
        main(["fit", str(p), "--x", "x", "--y", "y", "--by", "grp", "--sensitivity", "--mc", "20"])
        == 0
    )
    text = capsys.readouterr().out
    assert "group grp = a:" in text and "group grp = b:" in text
    assert (
        main(
            [
                "fit",
                str(p),
                "--x",
                "x",
                "--y",
                "y",
                "--by",
                "grp",
                "--sensitivity",
                "--mc",
                "0",
                "--format",
                "csv",
            ]
        )
        == 0
    )
    frame = pd.read_csv(__import__("io").StringIO(capsys.readouterr().out))
    assert "group" in frame.columns


def test_api_layer_does_not_import_the_cli():
    """comparo.fitting.source_sensitivity sits below the command layer (docs/architecture.md,
    'Who may import whom')."""
    import ast
    import importlib
    import inspect

    mod = importlib.import_module("comparo.fitting.source_sensitivity")

    tree = ast.parse(inspect.getsource(mod))
    names = [n.module for n in ast.walk(tree) if isinstance(n, ast.ImportFrom)]
    names += [a.name for n in ast.walk(tree) if isinstance(n, ast.Import) for a in n.names]
    assert not [
        m for m in names if m and (m.startswith("comparo.cli.commands") or m == "comparo.cli.main")
    ]


def test_a_source_that_cannot_be_left_out_counts_the_taxa_left(tmp_path):
    """Leaving out the only source of most y values leaves 2 taxa: the record says it was not
    refitted, with n = the taxa left with both values (not 0) and the reason."""
    from support import write_dataset

    from comparo.fitting.source_sensitivity import sensitivity
    from comparo.validation.dataset import load

    rows = []
    for i, (m, f) in enumerate([(1, 200), (2, 180), (4, 150), (8, 140), (16, 120), (32, 100)]):
        src = "s1" if i < 2 else "s2"
        rows.append(f"m{i},Genus species{i},body_mass,{m},g,,,,s1,T1,reported,,,")
        rows.append(f"f{i},Genus species{i},frequency_observed,{f},Hz,,,,{src},T2,reported,,,25")
    folder = write_dataset(tmp_path / "ds", rows)
    res = sensitivity(load(folder), "body_mass", "frequency_observed", "ols", mc=0)
    by_source = {r["source_id"]: r for r in res.leave_one_source_out}
    assert by_source["s2"]["slope"] is None
    assert by_source["s2"]["n"] == 2
    assert "not refitted" in by_source["s2"]["note"]
    assert (
        by_source["s1"]["slope"] is None and by_source["s1"]["n"] == 0
    )  # s1 holds every body mass


def test_verdict_says_which_uncertainties_were_not_propagated():
    from comparo.fitting.source_sensitivity import make_verdict

    me = {"share": 0.01, "fixed_x": 12, "fixed_y": 0, "points": 57}
    v = make_verdict([], None, {}, me)
    assert "negligible" not in v
    assert "not propagated: no x uncertainty for 12 of 57 taxa" in v
    assert "negligible" in make_verdict([], None, {}, {**me, "fixed_x": 0})
