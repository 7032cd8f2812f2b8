"""The ``comparo fit`` command on small CSV files."""

from __future__ import annotations

import io
import json

import numpy as np
import pandas as pd
import pytest
from support import FIT_JSON_KEYS

from comparo.cli.main import main


@pytest.fixture
def csv(tmp_path):
    rng = np.random.default_rng(12)
    lx = rng.uniform(-1, 3, 24)
    t = pd.DataFrame(
        {
            "taxon": [f"sp{i}" for i in range(24)],
            "mass": 10**lx,
            "freq": 10 ** (1.0 - 0.3 * lx + rng.normal(0, 0.05, 24)),
            "clade": np.where(np.arange(24) < 12, "a", "b"),
            "label": ["x"] * 24,
        }
    )
    t.loc[0, "mass"] = 0.0
    t.loc[1, "freq"] = np.nan
    path = tmp_path / "t.csv"
    t.to_csv(path, index=False)
    return path


def test_json_output_keys_and_excluded_rows(csv, capsys):
    code = main(
        [
            "fit",
            str(csv),
            "--x",
            "mass",
            "--y",
            "freq",
            "--method",
            "sma",
            "--against",
            "-0.3",
            "--format",
            "json",
        ]
    )
    assert code == 0
    d = json.loads(capsys.readouterr().out)
    assert set(d) == FIT_JSON_KEYS
    assert d["n"] == 22
    assert {e["label"] for e in d["excluded"]} == {"sp0", "sp1"}
    assert d["slope_ci"][0] < -0.3 < d["slope_ci"][1]
    assert d["against"]["value"] == -0.3


def test_text_csv_and_options(csv, capsys):
    assert (
        main(
            [
                "fit",
                str(csv),
                "--x",
                "mass",
                "--y",
                "freq",
                "--method",
                "ols",
                "--by",
                "clade",
                "--breakpoint",
                "--bootstrap",
                "200",
                "--log",
                "e",
            ]
        )
        == 0
    )
    out = capsys.readouterr().out
    assert (
        "OLS fit of freq on mass (ln axes)" in out
        and "bootstrap (200 resamples" in out
        and "excluded (2)" in out
    )
    assert (
        main(["fit", str(csv), "--x", "mass", "--y", "freq", "--format", "csv", "--by", "clade"])
        == 0
    )
    frame = pd.read_csv(io.StringIO(capsys.readouterr().out))
    assert {"slope", "intercept"} <= set(frame["term"]) and {"a", "b", "(common)"} <= set(
        frame["group"].dropna()
    )


@pytest.mark.parametrize(
    "extra, message",
    [
        (["--x", "nope", "--y", "freq"], "'nope' is not in the table"),
        (["--x", "label", "--y", "freq"], "not numeric"),
        (["--x", "mass", "--y", "freq", "--ci", "95"], "--ci"),
        (["--x", "mass", "--y", "freq", "--method", "pgls"], "needs a tree"),
    ],
)
def test_bad_input_exit_2_with_message(csv, capsys, extra, message):
    assert main(["fit", str(csv), *extra]) == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err


def test_missing_file_and_too_few_points(tmp_path, capsys):
    assert main(["fit", str(tmp_path / "none.csv"), "--x", "a", "--y", "b"]) == 2
    assert "neither a dataset folder nor a CSV" in capsys.readouterr().err
    p = tmp_path / "small.csv"
    pd.DataFrame({"taxon": ["a", "b", "c"], "m": [1.0, 2.0, -1.0], "f": [1.0, 2.0, 3.0]}).to_csv(
        p, index=False
    )
    assert main(["fit", str(p), "--x", "m", "--y", "f"]) == 2
    assert "at least 3 usable points" in capsys.readouterr().err
    q = tmp_path / "same.csv"
    pd.DataFrame({"taxon": list("abcd"), "m": [2.0] * 4, "f": [1.0, 2.0, 3.0, 4.0]}).to_csv(
        q, index=False
    )
    assert main(["fit", str(q), "--x", "m", "--y", "f"]) == 2
    assert "identical" in capsys.readouterr().err


def test_pgls_through_fit_matches_phylo_and_uses_tree_labels(tmp_path):
    """The fit front end returns what comparo.phylo.pgls computes (one source of
    truth), with the demo's taxa.csv tree labels, and the extra PGLS keys kept."""
    import json

    from support import DEMO, run_main

    import comparo
    from comparo.phylo import pgls

    tab = comparo.tabulate(comparo.load(DEMO))
    direct = pgls(
        table=tab,
        x="body_mass",
        y="frequency_observed",
        tree=str(DEMO / "tree.nwk"),
        log="10",
        ci=0.95,
        against=None,
        taxon_col="taxon",
        lambda_="ml",
    )
    proc = run_main(
        "fit",
        str(DEMO),
        "--x",
        "body_mass",
        "--y",
        "frequency_observed",
        "--method",
        "pgls",
        "--format",
        "json",
    )
    assert proc.returncode == 0, proc.stderr
    got = json.loads(proc.stdout)
    assert got["slope"] == pytest.approx(direct["slope"], rel=1e-9)
    assert got["lambda"] == pytest.approx(direct["lambda"], rel=1e-6)
    # the demo has gaps: taxa lacking either value are listed as excluded, none silently dropped
    both = tab[["body_mass", "frequency_observed"]].notna().all(axis=1)
    assert got["n"] == int(both.sum()) and len(got["excluded"]) == int((~both).sum()) > 0
    assert {e["label"] for e in got["excluded"]} == set(tab.loc[~both, "taxon"])
    assert "lambda_tests" in got["phylo"]
    with_me = run_main(
        "fit",
        str(DEMO),
        "--x",
        "body_mass",
        "--y",
        "frequency_observed",
        "--method",
        "pgls",
        "--tip-se",
        "--format",
        "json",
    )
    assert with_me.returncode == 0, with_me.stderr
    assert json.loads(with_me.stdout)["phylo"]["measurement_error"]


@pytest.fixture
def outlier_csv(tmp_path):
    """Invented: 30 points on freq = 10 mass^-0.3 (sd 0.03 in log10), two planted 10-fold outliers
    (seed 21)."""
    rng = np.random.default_rng(21)
    lx = rng.uniform(-1, 3, 30)
    ly = 1.0 - 0.3 * lx + rng.normal(0, 0.03, 30)
    ly[[4, 17]] += 1.0
    t = pd.DataFrame({"taxon": [f"sp{i}" for i in range(30)], "mass": 10**lx, "freq": 10**ly})
    path = tmp_path / "o.csv"
    t.to_csv(path, index=False)
    return path


def test_drop_flagged_cli_text_json_csv(outlier_csv, capsys):
    base = ["fit", str(outlier_csv), "--x", "mass", "--y", "freq", "--method", "ols"]
    assert main([*base, "--format", "json"]) == 0
    assert "refit_without_flagged" not in json.loads(capsys.readouterr().out)
    assert main([*base, "--drop-flagged", "--format", "json"]) == 0
    d = json.loads(capsys.readouterr().out)
    rf = d["refit_without_flagged"]
    assert {x["label"] for x in rf["dropped"]} == {"sp4", "sp17"} and rf["n_dropped"] == 2
    assert rf["rules"] == ["bonferroni", "robust_weight", "lts_residual"]
    assert d["n"] == 30 and rf["fit"]["n"] == 28
    assert abs(rf["fit"]["slope"] + 0.3) < abs(d["slope"] + 0.3)
    assert main([*base, "--drop-flagged=outlier,cook"]) == 0
    out = capsys.readouterr().out
    assert "rules: bonferroni, cooks_d, robust_weight, lts_residual" in out
    assert "dropped sp4:" in out and "dropped sp17:" in out and "(was " in out
    assert main([*base, "--drop-flagged", "--format", "csv"]) == 0
    frame = pd.read_csv(io.StringIO(capsys.readouterr().out))
    dropped = frame[frame["group"] == "(dropped)"]
    assert (
        set(dropped["term"]) == {"sp4", "sp17"}
        and dropped["flags"].str.contains("bonferroni").all()
    )
    assert (frame["group"] == "(without flagged)").sum() == 3


def test_drop_flagged_bad_rule_exit_2(outlier_csv, capsys):
    assert (
        main(["fit", str(outlier_csv), "--x", "mass", "--y", "freq", "--drop-flagged=nonsense"])
        == 2
    )
    err = capsys.readouterr().err
    assert "unknown rule 'nonsense'" in err and "Traceback" not in err


def test_plain_csv_without_taxon_column_names_points_by_first_column(tmp_path):
    from support import run_main

    named = tmp_path / "named.csv"
    named.write_text("species,mass,freq\nA a,1,200\nB b,2,180\nC c,4,150\nD d,8,140\nE e,16,1200\n")
    r = run_main("fit", str(named), "--x", "mass", "--y", "freq", "--method", "ols")
    assert r.returncode == 0, r.stderr
    assert "named by its first column 'species'" in r.stderr
    assert "E e:" in r.stdout  # the flagged point by its name, not its line
    bare = tmp_path / "bare.csv"
    bare.write_text("mass,freq\n1,200\n2,180\n4,150\n8,140\n16,1200\n")
    r = run_main("fit", str(bare), "--x", "mass", "--y", "freq", "--method", "ols")
    assert r.returncode == 0 and "named by CSV line" in r.stderr and "row 6:" in r.stdout


def test_units_piped_is_a_plain_table_with_every_key_whole():
    from support import run_main

    from comparo.base.catalog import load_catalog

    r = run_main("units")
    assert r.returncode == 0
    first_cells = [line.split("  ")[0] for line in r.stdout.splitlines()[1:]]
    assert first_cells == list(load_catalog())
    assert not any(c in r.stdout for c in "┃│━")


def test_fit_help_shows_defaults():
    from support import run_main

    text = " ".join(run_main("fit", "--help").stdout.split())
    for part in (
        "(default: sma)",
        "(default: 0)",
        "(default: 20240601)",
        "(default: text)",
        "(default 0.95)",
    ):
        assert part in text, part


@pytest.mark.parametrize(
    "method, test, df",
    [
        ("ols", "t", 20),
        ("lts", "t", None),
        ("sma", "F(1, n-2)", [1, 20]),
        ("ma", "F(1, n-2)", [1, 20]),
        ("robust", "z", None),
    ],
)
def test_against_names_its_statistic(csv, capsys, method, test, df):
    """``--against`` reports {value, statistic, test, df, p}; the test is named as the method
    computes it (t on n - 2 df for OLS, F(1, n - 2) for SMA/MA: Warton et al. 2006, Table 5;
    a Wald z for the M-estimate) and the printed text names it too."""
    assert (
        main(
            [
                "fit",
                str(csv),
                "--x",
                "mass",
                "--y",
                "freq",
                "--method",
                method,
                "--against",
                "-0.3",
                "--format",
                "json",
            ]
        )
        == 0
    )
    a = json.loads(capsys.readouterr().out)["against"]
    assert (
        set(a) == {"value", "statistic", "test", "df", "p"}
        and a["test"] == test
        and 0 <= a["p"] <= 1
    )
    if df is not None:
        assert a["df"] == df
    assert (
        main(
            ["fit", str(csv), "--x", "mass", "--y", "freq", "--method", method, "--against", "-0.3"]
        )
        == 0
    )
    shown = f"F(1, {df[1]})" if test.startswith("F") else test
    assert f"slope = -0.3?  {shown} = " in capsys.readouterr().out


def test_old_test_slope_flag_still_works_with_a_note(csv, capsys):
    """The old flag gives the same numbers, says on stderr that it was renamed, and is not in
    --help."""
    args = ["fit", str(csv), "--x", "mass", "--y", "freq", "--method", "sma", "--format", "json"]
    assert main(args + ["--against", "-0.3"]) == 0
    new = json.loads(capsys.readouterr().out)
    assert main(args + ["--test-slope", "-0.3"]) == 0
    cap = capsys.readouterr()
    assert json.loads(cap.out) == new
    assert "--test-slope is renamed --against" in cap.err
    with pytest.raises(SystemExit):
        main(["fit", "--help"])
    helptext = capsys.readouterr().out
    assert "--against" in helptext and "--test-slope" not in helptext


def test_old_keyword_warns_and_gives_the_same_fit(csv):
    from comparo.fitting import fit

    t = pd.read_csv(csv)
    new = fit(t, "mass", "freq", "sma", against=-0.3).to_dict()
    with pytest.warns(DeprecationWarning, match="renamed against"):
        old = fit(t, "mass", "freq", "sma", test_slope=-0.3).to_dict()
    assert old == new


def test_group_comparisons_read_as_questions(csv, capsys):
    assert (
        main(["fit", str(csv), "--x", "mass", "--y", "freq", "--method", "sma", "--by", "clade"])
        == 0
    )
    out = capsys.readouterr().out
    for question in (
        "one exponent for all groups?",
        "same height at the common exponent?",
        "groups offset along the common line?",
    ):
        assert question in out
