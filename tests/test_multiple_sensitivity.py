"""``comparo fit --x X1 --x X2 --sensitivity``: leave one source out of a multiple regression.

Independent route: the table without a source is built here from the observations file with
pandas (one value per taxon and quantity, so setting a source aside removes exactly its values)
and fitted with statsmodels OLS on log10 values. The slopes and their SEs do not depend on the
unit of a column or on a constant temperature correction (both shift log values by a constant),
so those are compared; the intercept is not.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from support import write_dataset

from comparo.cli.main import main
from comparo.fitting.multiple import multiple_fit
from comparo.fitting.multiple_sensitivity import multiple_sensitivity
from comparo.validation.dataset import load

N_SRC = 5


def _compilation(folder, n_taxa: int = 30, seed: int = 3):
    """Invented: frequency = 30 Hz (M/g)^-0.25 (r/um)^0.5 with 5% scatter; each taxon's values from
    one source, the sources rotating over taxa, and the frequencies of SRC2 biased (x M^0.15);
    one fiber radius of SRC0 comes from SRC4 instead, so a taxon can lose only one value."""
    rng = np.random.default_rng(seed)
    logm = np.linspace(-3, 3, n_taxa)
    logr = rng.uniform(0, 1.5, n_taxa)
    rows, srcs = (
        [],
        ["source_id,citation,year,doi"]
        + [f"SRC{s},Invented source {s} (2000) for tests,2000," for s in range(N_SRC)],
    )
    for i, (lm, lr) in enumerate(zip(logm, logr, strict=True)):
        taxon = f"Fictus sp{chr(97 + i // 26)}{chr(97 + i % 26)}"
        f = 30 * 10 ** (-0.25 * lm + 0.5 * lr + 0.02 * rng.normal())
        sf = f"SRC{i % N_SRC}"
        if sf == "SRC2":
            f *= 10 ** (0.15 * lm)
        rows.append(f"m{i},{taxon},body_mass,{10**lm:.6g},g,,,,{sf},Table 1,reported,,,")
        rows.append(
            f"r{i},{taxon},fiber_radius,{10**lr:.6g},um,,,,{'SRC4' if i == 0 else sf},Table 2,"
            "reported,,,"
        )
        rows.append(f"f{i},{taxon},frequency_observed,{f:.6g},Hz,,,,{sf},Table 3,reported,,,25")
    write_dataset(folder, rows, sources="\n".join(srcs) + "\n")
    return folder


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    return _compilation(tmp_path_factory.mktemp("multi_sens"))


def _ols_without(folder, source):
    """statsmodels OLS of log10 frequency on log10 mass and radius, the source's rows removed."""
    import statsmodels.api as sm

    obs = pd.read_csv(folder / "observations.csv")
    obs = obs[obs.source_id != source]
    wide = obs.pivot(index="taxon", columns="quantity", values="value").dropna()
    X = sm.add_constant(np.log10(wide[["body_mass", "fiber_radius"]].to_numpy()))
    return sm.OLS(np.log10(wide["frequency_observed"].to_numpy()), X).fit()


def test_refit_without_each_source_matches_statsmodels_on_the_table_without_it(folder):
    s = multiple_sensitivity(
        load(folder), "frequency_observed", ["body_mass", "fiber_radius"], "ols"
    )
    full = _ols_without(folder, None)
    assert [s.terms[t]["estimate"] for t in ("body_mass", "fiber_radius")] == pytest.approx(
        full.params[1:], rel=1e-6
    )
    assert len(s.leave_one_source_out) == N_SRC
    for rec in s.leave_one_source_out:
        ref = _ols_without(folder, rec["source_id"])
        assert rec["n"] == int(ref.nobs)
        for j, t in enumerate(("body_mass", "fiber_radius"), start=1):
            assert rec["terms"][t]["estimate"] == pytest.approx(ref.params[j], rel=1e-6)
            want = (ref.params[j] - full.params[j]) / full.bse[j]
            assert rec["terms"][t]["shift_se"] == pytest.approx(want, rel=1e-5, abs=1e-6)
    shifts = [abs(r["shift_se"]) for r in s.leave_one_source_out]
    assert shifts == sorted(shifts, reverse=True)
    top = s.leave_one_source_out[0]
    assert top["source_id"] == "SRC2" and top["term"] == "body_mass"  # the planted bias
    assert "SRC2" in s.verdict


def test_plain_table_says_the_part_is_unavailable(folder):
    from comparo.curation.harmonise import per_taxon

    table = per_taxon(load(folder))
    s = multiple_sensitivity(table, "frequency_observed", ["body_mass", "fiber_radius"], "ols")
    assert s.leave_one_source_out is None and s.unavailable
    assert s.verdict == "source-level checks not available for a plain table"
    base = multiple_fit(table, "frequency_observed", ["body_mass", "fiber_radius"])
    assert s.terms["body_mass"]["estimate"] == base.terms[1]["estimate"]


def test_cli_json_and_text(folder, capsys):
    base = [
        "fit",
        str(folder),
        "--y",
        "frequency_observed",
        "--x",
        "body_mass",
        "--x",
        "fiber_radius",
        "--method",
        "ols",
        "--sensitivity",
        "--against",
        "body_mass=-0.25",
        "--against",
        "fiber_radius=0.5",
    ]
    assert main([*base, "--format", "json"]) == 0
    out = json.loads(capsys.readouterr().out)
    sens = out["sensitivity"]
    assert set(sens) == {"leave_one_source_out", "terms", "verdict", "unavailable"}
    rec = sens["leave_one_source_out"][0]
    assert {"source_id", "n", "terms", "shift_se", "term", "p", "flips", "note"} == set(rec)
    assert set(rec["terms"]) == {"intercept", "body_mass", "fiber_radius"}
    assert all(
        0 <= r["p"] <= 1 and isinstance(r["flips"], bool) for r in sens["leave_one_source_out"]
    )
    assert out["terms"][1]["estimate"] == pytest.approx(
        sens["terms"]["body_mass"]["estimate"], rel=1e-12
    )
    assert main(base) == 0
    text = capsys.readouterr().out
    assert "leave one source out (5 sources)" in text and "verdict:" in text


def test_robust_sensitivity_runs(folder, capsys):
    """--method robust with --sensitivity: each refit is the Huber fit on the rebuilt table."""
    s = multiple_sensitivity(
        load(folder), "frequency_observed", ["body_mass", "fiber_radius"], "robust"
    )
    assert len(s.leave_one_source_out) == N_SRC
    assert all(math.isfinite(r["shift_se"]) for r in s.leave_one_source_out)


def test_a_column_not_measured_in_the_dataset_exits_2(folder, capsys):
    """A derived or unknown column cannot be left out source by source: exit 2 with the reason."""
    assert (
        main(
            [
                "fit",
                str(folder),
                "--y",
                "frequency_observed",
                "--x",
                "body_mass",
                "--x",
                "no_such_column",
                "--method",
                "ols",
                "--sensitivity",
            ]
        )
        == 2
    )
    err = capsys.readouterr().err
    assert "'no_such_column'" in err and "Traceback" not in err
