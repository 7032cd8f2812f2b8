"""Defects a new user met on an own compilation of insects, birds and bats (invented values,
typed for these tests): each test states the independent route its expectation comes from."""

from __future__ import annotations

import csv
import shlex
from pathlib import Path

import pint

from comparo.cli.main import main

UREG = pint.UnitRegistry()


def run(*args) -> int:
    return main([str(a) for a in args])


def write_csv(path: Path, rows: list[list[str]]) -> Path:
    with open(path, "w", newline="", encoding="utf-8") as fh:
        csv.writer(fh).writerows(rows)
    return path


# ----------------------------------------------------------------------------- import


def test_a_column_in_the_wrong_unit_is_one_message_also_when_an_error_stops_the_import(
    tmp_path, capsys
) -> None:
    """Fibre diameters of 16-60 µm typed under '(mm)', and a source id missing from the
    sources table (an error: nothing is written). The column is still one message naming
    µm, not one out-of-range warning per cell. Independent route: pint converts each value
    from mm and from µm to µm and the test counts those inside the catalogue's plausible
    diameter range (4-3000 µm, docs/data-format.md)."""
    diam = [16, 20, 28, 50, 60, 36]
    rows = [["Species", "Source", "Fibre diameter (mm)"]] + [
        [f"Genus species{i}", "s1" if i < 4 else "s9", str(v)] for i, v in enumerate(diam)
    ]
    wide = write_csv(tmp_path / "wide.csv", rows)
    src = write_csv(
        tmp_path / "sources.csv", [["source_id", "citation"], ["s1", "Invented (2001)"]]
    )
    inside_mm = sum(4 <= UREG.Quantity(v, "mm").to("um").magnitude <= 3000 for v in diam)
    inside_um = sum(4 <= UREG.Quantity(v, "um").to("um").magnitude <= 3000 for v in diam)
    assert (inside_mm, inside_um) == (0, 6)
    assert run("import", wide, "-o", tmp_path / "out", "--sources", src) == 2
    err = capsys.readouterr().err
    assert "[source-unknown]" in err and not (tmp_path / "out").exists()
    assert "[out-of-range]" not in err
    line = next(ln for ln in err.splitlines() if "[column-unit]" in ln)
    assert f"{len(diam) - inside_mm} of {len(diam)} values" in line
    assert f"read in µm, {inside_um} of them are inside" in line


def test_the_map_file_hint_can_be_pasted_into_a_shell_when_the_path_has_spaces(
    tmp_path, capsys
) -> None:
    """A folder named with spaces and non-ASCII letters: the '--map PATH' of the hint, split
    as a POSIX shell splits it (Python's shlex, an independent reading), names the map file
    that was written."""
    folder = tmp_path / "Données brutes" / "Flug muskel"
    folder.mkdir(parents=True)
    rows = [["Species", "Source", "Mystery (Hz)"], ["Apis mellifera", "s1", "230"]]
    wide = write_csv(folder / "muscle sheet ü.csv", rows)
    assert run("import", wide, "-o", folder / "out ü") == 2
    err = capsys.readouterr().err
    line = next(ln for ln in err.splitlines() if "[map-file-written]" in ln)
    words = shlex.split(line.split("then rerun with ", 1)[1].split(" [map-file-written]")[0])
    assert words[0] == "--map" and len(words) == 2
    assert Path(words[1]).is_file() and Path(words[1]).parent == folder


# ----------------------------------------------------------------------------- table -o .xlsx


def _flyers(folder: Path) -> Path:
    """A bird (endotherm, 40 °C) and two insects, one without an operating temperature."""
    folder.mkdir()
    write_csv(
        folder / "taxa.csv",
        [
            ["taxon", "clade", "thermoregulation", "operating_temperature_c"],
            ["Columba livia", "Aves", "endotherm", "40"],
            ["Apis mellifera", "Hymenoptera", "heterotherm", "38.5"],
            ["Locusta migratoria", "Orthoptera", "ectotherm", ""],
        ],
    )
    write_csv(folder / "sources.csv", [["source_id", "citation"], ["s1", "Invented (2001)"]])
    rows = [
        [
            "obs_id",
            "taxon",
            "quantity",
            "value",
            "unit",
            "source_id",
            "locator",
            "basis",
            "temperature_c",
            "preparation",
        ]
    ]
    for i, (t, m, f, temp) in enumerate(
        [
            ("Columba livia", 400, 7, 40),
            ("Apis mellifera", 0.1, 235, 38),
            ("Locusta migratoria", 2, 20, 30),
        ]
    ):
        rows.append([f"m{i}", t, "body_mass", str(m), "g", "s1", "Table 1", "reported", "", ""])
        rows.append(
            [
                f"f{i}",
                t,
                "frequency_observed",
                str(f),
                "Hz",
                "s1",
                "Table 1",
                "reported",
                str(temp),
                "in_vivo",
            ]
        )
    write_csv(folder / "observations.csv", rows)
    return folder


def test_operating_temperature_has_its_unit_and_is_a_number_in_the_table_exports(tmp_path) -> None:
    """operating_temperature_c is in °C (docs/data-format.md): the units sidecar says so and
    the workbook holds numbers under 'operating_temperature_c (°C)'. Independent route: the
    values read back with openpyxl against taxa.csv read with the csv module."""
    import openpyxl

    ds = _flyers(tmp_path / "flyers")
    assert run("table", ds, "-o", tmp_path / "t.csv") == 0
    with open(tmp_path / "t.units.csv", newline="", encoding="utf-8") as fh:
        unit = {r["column"]: r["unit"] for r in csv.DictReader(fh)}
    assert unit["operating_temperature_c"] == "degC"
    assert run("table", ds, "-o", tmp_path / "t.xlsx") == 0
    ws = openpyxl.load_workbook(tmp_path / "t.xlsx")["table"]
    head = [c.value for c in ws[1]]
    j = head.index("operating_temperature_c (°C)")
    got = {r[0]: r[j] for r in ws.iter_rows(min_row=2, values_only=True)}
    with open(ds / "taxa.csv", newline="", encoding="utf-8") as fh:
        want = {
            r["taxon"]: (
                float(r["operating_temperature_c"]) if r["operating_temperature_c"] else None
            )
            for r in csv.DictReader(fh)
        }
    assert got == want


# ----------------------------------------------------------------------------- fit --breakpoint


def test_the_breakpoint_line_says_it_is_least_squares_under_an_sma_header(tmp_path, capsys) -> None:
    """`fit --method sma --breakpoint` prints the broken line under the SMA header; its
    slopes are those of the least-squares broken line (docs/methods/fitting.md), so the line
    says so. Independent route: a dense grid of breakpoints with numpy's lstsq on
    [1, x, (x - psi)+] (log10 axes), restricted as the docs say (3 distinct x each side);
    the printed slopes match the best grid line to the grid's resolution."""
    import json

    import numpy as np

    rng = np.random.default_rng(7)
    ds = _flyers(tmp_path / "flyers")
    x = 10 ** np.linspace(-6, 0, 12)
    y = np.where(np.log10(x) < -3, 2.4 - 0.05 * (np.log10(x) + 3), 2.4 - 0.4 * (np.log10(x) + 3))
    y = 10 ** (y + rng.normal(0, 0.05, len(x)))
    rows = [
        [
            "obs_id",
            "taxon",
            "quantity",
            "value",
            "unit",
            "source_id",
            "locator",
            "basis",
            "temperature_c",
            "preparation",
        ]
    ]
    taxa = [["taxon"]]
    for i, (m, f) in enumerate(zip(x, y, strict=True)):
        taxa.append([f"Genus sp{i}"])
        rows.append(
            [f"m{i}", f"Genus sp{i}", "body_mass", f"{m:.6g}", "kg", "s1", "T1", "reported", "", ""]
        )
        rows.append(
            [
                f"f{i}",
                f"Genus sp{i}",
                "frequency_observed",
                f"{f:.6g}",
                "Hz",
                "s1",
                "T1",
                "reported",
                "25",
                "in_vivo",
            ]
        )
    write_csv(ds / "observations.csv", rows)
    write_csv(ds / "taxa.csv", taxa)
    args = ("fit", ds, "--x", "body_mass", "--y", "frequency_observed", "--breakpoint")
    assert run(*args, "--method", "sma") == 0
    line = next(ln for ln in capsys.readouterr().out.splitlines() if "breakpoint at" in ln)
    assert "least-squares broken line (not SMA)" in line
    assert run(*args, "--method", "sma", "--format", "json") == 0
    bp = json.loads(capsys.readouterr().out)["breakpoint"]
    lx = np.log10([float(f"{m:.6g}") for m in x])
    ly = np.log10([float(f"{f:.6g}") for f in y])
    best = None
    for psi in np.linspace(lx[2], lx[-3], 20001):
        A = np.column_stack([np.ones_like(lx), lx, np.clip(lx - psi, 0, None)])
        coef = np.linalg.lstsq(A, ly, rcond=None)[0]
        rss = float(np.sum((ly - A @ coef) ** 2))
        if best is None or rss < best[0]:
            best = (rss, coef)
    assert bp["rss"] <= best[0] + 1e-12
    assert abs(bp["slope_left"] - best[1][1]) < 1e-3
    assert abs(bp["slope_right"] - (best[1][1] + best[1][2])) < 1e-3


# ----------------------------------------------------------------------------- fit temperature line


def test_fit_temperature_line_says_which_values_went_to_the_fallback(tmp_path, capsys) -> None:
    """reference_temperature_c = "operating": the locust has no operating temperature, so
    its 30 °C wingbeat goes to the fallback 25 °C, not to an operating temperature; the
    bird's in-vivo value is kept; the bee's 38 °C wingbeat, 0.5 K from its 38.5 °C, is
    kept too (heterotherm tolerance 2 K). Independent route: the standard rule
    R2 = R1 Q10^((T2 - T1)/10) (common practice; Bennett 1984) with Q10 2 (catalogue)."""
    import json

    ds = _flyers(tmp_path / "flyers")
    (ds / "comparo.toml").write_text('reference_temperature_c = "operating"\n', encoding="utf-8")
    args = ("fit", ds, "--x", "body_mass", "--y", "frequency_observed", "--method", "ols")
    assert run(*args, "--format", "json") == 0
    t = json.loads(capsys.readouterr().out)["temperature"]
    factor = 2.0 ** ((25 - 30) / 10)
    assert (t["values"], t["rescaled"], t["kept_as_measured"], t["fallback"]) == (3, 1, 2, 1)
    assert t["fallback_c"] == 25 and abs(t["factor_min"] - factor) < 1e-12
    assert run(*args) == 0
    line = next(ln for ln in capsys.readouterr().out.splitlines() if "temperature:" in ln)
    assert (
        f"rescaled to operating temperature (factor {factor:.3g}; 1 of them, of taxa without "
        "operating_temperature_c, to the fallback 25 °C)" in line
    )
    assert "needed no rescaling" not in line


# ----------------------------------------------------------------------------- report wording


def test_report_appendix_does_not_say_kept_values_are_at_the_reference_temperature(
    demo_report,
) -> None:
    """The demo's endotherms (clade Calorfictia) keep their in-vivo wingbeats at body
    temperature, so 'the value used (at the reference temperature)' was untrue for them.
    Independent route: the demo's observations.csv, read with the csv module, gives each
    kept row's reported value and measurement temperature; the appendix row shows that value
    unchanged, at a temperature other than the reference 25 °C."""
    import re

    data, out, _ = demo_report
    page = (out / "report.html").read_text(encoding="utf-8")
    intro = re.search(r"<p>Every plotted value[^<]*", page).group(0)
    assert "at the reference temperature" not in intro and "kept as measured stays" in intro
    with open(data / "observations.csv", newline="", encoding="utf-8") as fh:
        obs = {r["obs_id"]: r for r in csv.DictReader(fh)}
    cells = re.compile(r"<td[^>]*>(.*?)</td>")
    kept = [
        cells.findall(tr)
        for tr in re.findall(r"<tr><td>.*?</tr>", page)
        if "kept as measured" in tr
    ]
    assert kept
    for row in kept:
        r = obs[row[8]]
        assert float(row[5]) == float(r["value"]) and r["unit"] == row[6] == "Hz"
        assert float(r["temperature_c"]) != 25.0
    assert "factor: the multipliers applied (1 at the reference temperature)" not in page


# ----------------------------------------------------------------------------- regime figure


def test_regime_legend_does_not_call_a_taxon_above_its_bound_limited(tmp_path) -> None:
    """Taxa on the hydraulic side of Π that cycle above their smaller bound are counted apart
    (limited by neither: docs/methods/derived.md); the legend must not also count them as
    'hydraulic limited'. Independent route: the counts are taken from the invented frame's
    own regime and frequency_vs_bound columns."""
    import pandas as pd

    from comparo.report import figures as plots

    d = pd.DataFrame(
        {
            "taxon": ["a", "b", "c", "d"],
            "frequency_observed": [50.0, 60.0, 5.0, 100.0],
            "frequency_kinetic_bound": [500.0, 400.0, 300.0, 90.0],
            "frequency_hydraulic_bound": [2.0, 3.0, 10.0, 900.0],
            "poro_kinetic_ratio": [250.0, 130.0, 30.0, 0.1],
            "regime": ["hydraulic", "hydraulic", "hydraulic", "kinetic"],
            "frequency_vs_bound": ["above", "above", "below", "above"],
        }
    )
    fig = plots.regime_plot(d)
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    hyd = d["regime"] == "hydraulic"
    above = d["frequency_vs_bound"] == "above"
    assert f"hydraulic limited (n = {hyd.sum()})" not in labels
    assert (
        f"hydraulic side of Π (n = {hyd.sum()}): {(hyd & ~above).sum()} hydraulic limited, "
        f"{(hyd & above).sum()} above their smaller bound"
    ) in labels
    assert f"above its smaller bound: limited by neither (n = {above.sum()})" in labels


# ------------------------------------------------------------------------- report sensitivity table


def test_a_source_that_cannot_be_left_out_says_why_in_the_refit_table(tmp_path) -> None:
    """Every body mass comes from one source: without it nothing is left to fit, and the
    report's refit table (tables/sensitivity_<fit>.csv and the HTML) showed an empty row with
    'flips: no' and no reason. Independent route: the taxa left without that source, counted
    from observations.csv with the csv module (none have a body mass)."""
    from comparo.fitting.source_sensitivity import sensitivity
    from comparo.report import sensitivity_frame

    ds = tmp_path / "flyers"
    _flyers(ds)
    with open(ds / "observations.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    for r in rows[1:]:
        if r[2] == "body_mass":
            r[5] = "s2"
    write_csv(ds / "observations.csv", rows)
    write_csv(
        ds / "sources.csv",
        [["source_id", "citation"], ["s1", "Invented (2001)"], ["s2", "Invented (2002)"]],
    )
    left = {r[1] for r in rows[1:] if r[2] == "body_mass" and r[5] != "s2"}
    import comparo

    s = sensitivity(comparo.load(ds), "body_mass", "frequency_observed", "ols", mc=20)
    f = sensitivity_frame(s)
    row = f[f["changed"] == "without s2"].iloc[0]
    assert row["n"] == len(left) == 0
    assert row["note"].startswith("not refitted") and str(len(left)) in row["note"]
    assert (f.loc[f["changed"] == "without s1", "note"] != "").all()  # no frequency left either


# ----------------------------------------------------------------------------- audit text


def test_audit_text_says_what_the_temperature_policy_did(tmp_path, capsys) -> None:
    """The audit's text said nothing about temperature, its JSON did. Independent route:
    the three wingbeats by the rules of docs/methods/temperature.md worked by hand: the
    endotherm's (in vivo, 40 °C) and the heterotherm's (38 °C, within 2 K of 38.5 °C) are
    kept; the ectotherm's (30 °C, no operating temperature) goes to the fallback 25 °C."""
    import json

    ds = _flyers(tmp_path / "flyers")
    (ds / "comparo.toml").write_text('reference_temperature_c = "operating"\n', encoding="utf-8")
    assert run("audit", ds) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert (
        "temperature: 1 value(s) rescaled to operating temperature (25 °C for taxa without one), "
        "2 kept as measured (in vivo, regulating taxa), 0 without a temperature"
    ) in text
    assert run("audit", ds, "--format", "json") == 0
    t = json.loads(capsys.readouterr().out)["temperature"]
    assert t["normalised"] == 1 and sorted(t["kept_as_measured"]) == ["f0", "f1"]


def test_the_plus_minus_hint_names_a_spread_column_for_the_cells_own_column(
    tmp_path, capsys
) -> None:
    """A '650 ± 60' cell under 'Attachment rate (s-1)' was told to use a column like 'Body mass
    SD (g)'. The example now names the cell's own trait, and a sheet that follows it imports:
    the spread column pairs with its trait and the uncertainty is 60 s⁻¹ (the value typed;
    pint reads 's**-1' and '1/s' as the same unit)."""
    import re

    rows = [["Species", "Source", "Attachment rate (s-1)"], ["Apis mellifera", "s1", "650 ± 60"]]
    wide = write_csv(tmp_path / "wide.csv", rows)
    assert run("import", wide, "-o", tmp_path / "out") == 2
    err = capsys.readouterr().err
    header = re.search(r"own column, e\.g\. '([^']+)'", err).group(1)
    assert header == "Attachment rate SD (s-1)"
    rows = [
        ["Species", "Source", "Attachment rate (s-1)", header],
        ["Apis mellifera", "s1", "650", "60"],
    ]
    wide = write_csv(tmp_path / "wide2.csv", rows)
    assert run("import", wide, "-o", tmp_path / "out2") == 0
    with open(tmp_path / "out2" / "observations.csv", newline="", encoding="utf-8") as fh:
        (obs,) = list(csv.DictReader(fh))
    assert obs["quantity"] == "attach_rate" and obs["uncertainty_kind"] == "sd"
    u = UREG.Quantity(float(obs["uncertainty"]), obs["unit"].replace("s-1", "s**-1")).to("1/s")
    assert abs(u.magnitude - 60) < 1e-12
