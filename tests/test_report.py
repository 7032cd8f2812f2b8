"""Behaviour of the HTML report on a copy of the synthetic demo compilation (invented data)."""

from __future__ import annotations

import json
import shutil
import struct
from html.parser import HTMLParser
from pathlib import Path

import pandas as pd
import pytest
from support import DEMO

from comparo.cli.main import main
from comparo.report import build_report


class _Collect(HTMLParser):
    """Collects img sources, every cell's data-value and the appendix table's taxa; checks tag
    balance."""

    VOID = {"meta", "img", "br", "hr", "link", "input", "wbr"}

    def __init__(self):
        super().__init__()
        self.stack, self.imgs, self.values, self.appendix_taxa = [], [], [], set()
        self.in_appendix, self.row, self.cell_text, self.mismatched = False, [], None, 0
        self.table_id, self.table_values, self.verdicts, self.in_verdict = None, {}, [], False
        self.appendix_rows, self.cell_value = [], None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "img":
            self.imgs.append(a.get("src", ""))
        if tag not in self.VOID:
            self.stack.append(tag)
        if tag == "table" and "appendix" in (a.get("class") or "").split():
            self.in_appendix = True
        if tag == "table":
            self.table_id = a.get("id")
            self.table_values.setdefault(self.table_id, [])
        if tag == "span" and a.get("class") == "verdict":
            self.verdicts.append("")
            self.in_verdict = True
        if tag == "td":
            self.cell_text = ""
            self.cell_value = float(a["data-value"]) if "data-value" in a else None
            if "data-value" in a:
                self.values.append(float(a["data-value"]))
                self.table_values[self.table_id].append(float(a["data-value"]))

    def handle_data(self, data):
        if self.cell_text is not None:
            self.cell_text += data
        if self.in_verdict:
            self.verdicts[-1] += data

    def handle_endtag(self, tag):
        if tag in self.VOID:
            return
        if tag == "span":
            self.in_verdict = False
        if not self.stack or self.stack.pop() != tag:
            self.mismatched += 1
        if tag == "td" and self.cell_text is not None:
            self.row.append(
                self.cell_text if self.cell_value is None else (self.cell_text, self.cell_value)
            )
            self.cell_text = None
        if tag == "tr" and self.in_appendix:
            if self.row:
                self.appendix_taxa.add(self.row[0])
                self.appendix_rows.append(self.row)
            self.row = []
        if tag == "table":
            self.in_appendix = False
            self.table_id = None


@pytest.fixture(scope="module")
def runs(demo_report, tmp_path_factory):
    """The shared demo report (seed 7) and a second run with the same seed, for byte identity."""
    data, out1, first = demo_report
    base = tmp_path_factory.mktemp("report")
    second = build_report(data, base / "out2", seed=7)
    return data, out1, base / "out2", first, second


@pytest.fixture(scope="module")
def parsed(runs):
    p = _Collect()
    p.feed((runs[1] / "report.html").read_text(encoding="utf-8"))
    p.close()
    return p


def _png_size(path: Path) -> tuple[int, int]:
    head = path.read_bytes()[:24]
    assert head[:8] == b"\x89PNG\r\n\x1a\n", f"{path.name} is not a PNG"
    return struct.unpack(">II", head[16:24])


def test_report_renders_every_figure_as_png_and_embeds_it(runs, parsed):
    """Each figure is a PNG of print-readable size (width 400-3000 px) and appears base64-embedded
    in the HTML."""
    _, out, _, res, _ = runs
    assert res.ok
    pngs = sorted((out / "figures").glob("*.png"))
    assert len(pngs) == len([f for f in res.figures if f.endswith(".png")]) >= 5
    for png in pngs:
        w, h = _png_size(png)
        assert 400 <= w <= 3000 and 300 <= h <= 3000, (png.name, w, h)
        assert (png.with_suffix(".svg")).read_bytes().lstrip().startswith(b"<?xml")
    embedded = {src for src in parsed.imgs if src.startswith("data:image/png;base64,")}
    import base64

    for png in pngs:
        assert "data:image/png;base64," + base64.b64encode(png.read_bytes()).decode() in embedded, (
            png.name
        )
    assert any(p.stem.endswith("_lambda") for p in pngs), (
        "the PGLS fit of the demo has a lambda profile"
    )
    assert any(p.stem.startswith("fit3_pgls") and p.stem.endswith("_tree") for p in pngs), (
        "the PGLS fit has its tree"
    )
    assert sum(p.stem.endswith("_sensitivity") for p in pngs) >= 2, "forest plots of the SMA fits"
    assert all(not s.startswith("http") for s in parsed.imgs), (
        "no figure is fetched from the network"
    )


def test_html_parses_and_states_it_is_a_research_aid_on_invented_data(runs, parsed):
    html = (runs[1] / "report.html").read_text(encoding="utf-8")
    assert parsed.mismatched == 0 and parsed.stack == []
    assert "research aid" in html and "invented" in html
    assert (
        html.index('id="summary"')
        < html.index('id="analyses"')
        < html.index('id="appendix"')
        < html.index('id="methods"')
    )
    assert "<script src" not in html and "<link" not in html


def test_every_plotted_taxon_is_in_the_appendix(runs, parsed):
    points = pd.read_csv(runs[1] / "tables" / "points.csv")
    assert set(points["label"]) <= parsed.appendix_taxa
    per = {
        f["id"]: f["result"]["n"]
        for f in json.loads((runs[1] / "tables" / "fits.json").read_text())
        if "result" in f
    }
    assert points.groupby("analysis").size().to_dict() == per, "one plotted point per fitted taxon"
    assert "doi.org/10.99999/comparo.demo." in (runs[1] / "report.html").read_text(encoding="utf-8")


def test_numbers_in_html_equal_the_tables(runs, parsed):
    """Every slope, intercept and CI of tables/fits.csv is a data-value of a cell in the HTML,
    exactly."""
    fits = pd.read_csv(runs[1] / "tables" / "fits.csv")
    values = set(parsed.values)
    for col in ("estimate", "ci_low", "ci_high"):
        for v in fits[col].dropna():
            assert float(v) in values, (col, v)
    per = json.loads((runs[1] / "tables" / "fits.json").read_text())
    slopes = fits[(fits["term"] == "slope") & fits["group"].isna()]["estimate"].tolist()
    assert slopes == [f["result"]["slope"] for f in per if "result" in f]


def _same(csv_value, json_value) -> bool:
    """A CSV cell equals a JSON value exactly; an empty cell (NaN) stands for null."""
    if json_value is None:
        return csv_value != csv_value
    return float(csv_value) == float(json_value)


def _sens_csv(out: Path, aid: str) -> pd.DataFrame:
    return pd.read_csv(out / "tables" / f"sensitivity_{aid}.csv")


def test_sensitivity_numbers_in_html_equal_the_tables(runs, parsed):
    """Each sensitivity table of the HTML holds exactly the numbers of tables/sensitivity_*.csv
    (both ways)."""
    out = runs[1]
    entries = json.loads((out / "tables" / "sensitivity.json").read_text())
    done = [e for e in entries if "result" in e]
    assert {e["id"][:4] for e in done} >= {"fit1", "fit2"}, (
        "the SMA fits of the demo have a sensitivity"
    )
    summary = pd.read_csv(out / "tables" / "sensitivity_summary.csv").set_index("analysis")
    for e in done:
        aid, res = e["id"], e["result"]
        refits = _sens_csv(out, aid)
        loso = refits[refits["part"] == "leave_one_source_out"]
        cols = ["n", "slope", "ci_low", "ci_high", "p", "shift_se"]
        want = sorted(float(v) for v in loso[cols].to_numpy().ravel() if v == v)
        assert sorted(parsed.table_values[f"sens-loso-{aid}"]) == want
        assert [r["source_id"] for r in res["leave_one_source_out"]] == [
            c.removeprefix("without ") for c in loso["changed"]
        ]
        assert loso["slope"].tolist() == [r["slope"] for r in res["leave_one_source_out"]]
        basis = refits[refits["part"] == "by_basis"]
        want = sorted(float(v) for v in basis[cols + ["ci_change"]].to_numpy().ravel() if v == v)
        assert sorted(parsed.table_values[f"sens-basis-{aid}"]) == want
        row = summary.loc[aid]
        jack = [
            row[c]
            for c in ("n", "slope", "jackknife_se", "analytic_se", "se_ratio")
            if row[c] == row[c]
        ]
        assert sorted(parsed.table_values[f"sens-jack-{aid}"]) == sorted(float(v) for v in jack)
        assert _same(row["jackknife_se"], res["jackknife_se"]["slope_jackknife"])
        me = res["measurement_error"]
        for col, key in (
            ("me_spread", "spread"),
            ("total_se", "total_se"),
            ("mc_draws", "draws"),
            ("me_share", "share"),
        ):
            assert _same(row[col], me[key]), col
        if me["spread"] is not None:
            assert me["spread"] in parsed.table_values[f"sens-me-{aid}"]
        assert row["verdict"] == res["verdict"]
        assert parsed.verdicts.count(res["verdict"]) == 2, (
            "verdict in the summary and in the section"
        )
    assert json.loads((out / "run.json").read_text())["sensitivity_draws"] == done[0]["draws"]


def test_report_sensitivity_equals_the_fit_command(runs, capsys):
    """``comparo fit --sensitivity --format json`` gives the report's leave-one-source-out, basis
    and jackknife parts."""
    data, out = runs[0], runs[1]
    entry = next(
        e
        for e in json.loads((out / "tables" / "sensitivity.json").read_text())
        if e["id"].startswith("fit2_")
    )
    assert (
        main(
            [
                "fit",
                str(data),
                "--x",
                "fiber_radius",
                "--y",
                "frequency_observed",
                "--method",
                "sma",
                "--sensitivity",
                "--format",
                "json",
            ]
        )
        == 0
    )
    cli = json.loads(capsys.readouterr().out)["sensitivity"]
    for key in ("leave_one_source_out", "by_basis", "jackknife_se"):
        assert cli[key] == entry["result"][key], key


def test_report_fit_equals_the_fit_command_json(runs, capsys):
    """The same fit through ``comparo fit --format json`` gives the object in tables/fits.json."""
    data, out = runs[0], runs[1]
    per = {
        f["id"]: f["result"]
        for f in json.loads((out / "tables" / "fits.json").read_text())
        if "result" in f
    }
    rid = next(k for k in per if k.startswith("fit2_"))
    assert (
        main(
            [
                "fit",
                str(data),
                "--x",
                "fiber_radius",
                "--y",
                "frequency_observed",
                "--method",
                "sma",
                "--format",
                "json",
            ]
        )
        == 0
    )
    cli = json.loads(capsys.readouterr().out)
    assert cli == per[rid]


def test_two_runs_are_byte_identical(runs):
    """Tables and figures equal byte for byte; run.json equal apart from its timestamp."""
    _, out1, out2, _, _ = runs
    for sub in ("tables", "figures"):
        names = sorted(p.name for p in (out1 / sub).iterdir())
        assert names == sorted(p.name for p in (out2 / sub).iterdir())
        for n in names:
            assert (out1 / sub / n).read_bytes() == (out2 / sub / n).read_bytes(), n
    r1, r2 = (json.loads((o / "run.json").read_text()) for o in (out1, out2))
    r1.pop("created_utc"), r2.pop("created_utc")
    assert r1 == r2
    assert r1["seed"] == 7 and set(r1["inputs_sha256"]) >= {"observations.csv", "sources.csv"}


def test_invalid_dataset_renders_an_error_page_and_exits_2(tmp_path, capsys):
    data = tmp_path / "bad"
    shutil.copytree(DEMO, data)
    obs = data / "observations.csv"
    lines = obs.read_text(encoding="utf-8").splitlines()
    lines[1] = lines[1].replace(",reported,", ",guessed,", 1)
    obs.write_text("\n".join(lines) + "\n", encoding="utf-8")
    code = main(["report", str(data), "-o", str(tmp_path / "out")])
    assert code == 2
    html = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert "validation failed" in html and "guessed" in html
    assert "error" in capsys.readouterr().err


def test_diagnostics_figure_marks_exactly_the_flagged_taxa_at_the_cuts_used(runs):
    """For every fit (SMA with groups, SMA, PGLS): the taxa named in the drawn diagnostics figure
    (its SVG, gid "flag-label:...") are exactly the taxa of tables/flags.csv flagged for that fit;
    the cut-off lines drawn (gid "cut:NAME:VALUE") are the cut-offs written in the flags' reasons
    and equal the textbook values recomputed here from n: 4/n and 2p/n (common practice; Hoaglin &
    Welsch 1978), t(1 - 0.05/(2n); n - 3) (Bonferroni, Cook & Weisberg 1982) and F(0.5; 2, n - 2)
    (Cook 1977), via scipy.stats. The HTML caption names the same taxa and the fit's summary never
    says "flags: none" beside a figure that marks taxa."""
    import re

    from scipy import stats

    out = runs[1]
    flags = pd.read_csv(out / "tables" / "flags.csv")
    html_text = (out / "report.html").read_text(encoding="utf-8")
    fits = {
        f["id"]: f for f in json.loads((out / "tables" / "fits.json").read_text()) if "result" in f
    }
    methods = set()
    for aid, f in fits.items():
        svg = (out / "figures" / f"{aid}_diagnostics.svg").read_text(encoding="utf-8")
        drawn = set(re.findall(r'id="flag-label:([^"]+)"', svg))
        flagged = set(flags.loc[(flags["analysis"] == aid) & (flags["kind"] == "flag"), "label"])
        assert drawn == flagged, aid
        assert {o["label"] for o in f["result"]["outliers"]} == flagged, aid
        n = f["result"]["n"]
        cuts = {k: float(v) for k, v in re.findall(r'id="cut:([a-z_0-9]+):([^"]+)"', svg)}
        assert cuts["cooks_4n"] == pytest.approx(4 / n, rel=1e-12)
        assert cuts["leverage"] == pytest.approx(4 / n, rel=1e-12)
        assert cuts["bonferroni"] == pytest.approx(
            stats.t.ppf(1 - 0.05 / (2 * n), n - 3), rel=1e-12
        )
        assert cuts["cooks_f"] == pytest.approx(stats.f.ppf(0.5, 2, n - 2), rel=1e-12)
        for reason in flags.loc[(flags["analysis"] == aid) & (flags["kind"] == "flag"), "reason"]:
            value = float(re.search(r"= ([0-9.]+)$|cut ([0-9.]+)", reason).group(0).split()[-1])
            assert any(abs(value - c) < 1e-4 for c in cuts.values()), (aid, reason)
        section = html_text.split(f'<h3 id="{aid}">', 1)[1].split("<h3", 1)[0]
        for lab in flagged:
            assert lab in section.split("residual diagnostics", 1)[1], (aid, lab)
        if flagged:
            assert "flags: none" not in section
        methods.add(f["method"])
        kinds = set(flags.loc[(flags["analysis"] == aid) & (flags["kind"] == "flag"), "residuals"])
        assert kinds <= {
            "phylogenetically whitened residuals (PGLS)"
            if f["method"] == "pgls"
            else "least-squares residuals of y on x (fitted scale)"
        }
    assert {"sma", "pgls"} <= methods


def test_tree_with_zero_length_tip_edges_reports_without_the_lambda_1_point(tmp_path):
    """Two sister tips with zero-length edges make the covariance singular at lambda = 1 (identical
    rows of C): the report still runs, the lambda profile is drawn without lambda = 1 and says why,
    and the PGLS fit keeps its whitened flags (lambda is estimated below 1)."""
    import re

    data = tmp_path / "demo"
    shutil.copytree(DEMO, data)
    tree = (data / "tree.nwk").read_text(encoding="utf-8")
    tree, k = re.subn(
        r"\(Exemplella_inventa:[0-9.]+,Exemplella_demonstrans:[0-9.]+\)",
        "(Exemplella_inventa:0,Exemplella_demonstrans:0)",
        tree,
    )
    assert k == 1
    (data / "tree.nwk").write_text(tree, encoding="utf-8")
    res = build_report(data, tmp_path / "out", seed=5, sensitivity_draws=0)
    assert res.ok
    pgls = [f for f in res.fits if f["method"] == "pgls"]
    assert pgls and all("result" in f for f in pgls)
    aid = pgls[0]["id"]
    assert (tmp_path / "out" / "figures" / f"{aid}_lambda.png").exists()
    html_text = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert "λ = 1 not drawn: the tree has tip edges of length 0" in html_text
    assert (tmp_path / "out" / "figures" / f"{aid}_diagnostics.svg").exists()


def test_report_package_imports_nothing_from_the_command_layer():
    """The report is a core module: no file of comparo/report imports comparo.cli.commands (read
    with ast)."""
    import ast

    import comparo.report

    folder = Path(comparo.report.__file__).parent
    for path in folder.glob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom):
                assert not (node.module or "").startswith("comparo.cli.commands"), path.name
            if isinstance(node, ast.Import):
                assert not any(a.name.startswith("comparo.cli.commands") for a in node.names), (
                    path.name
                )
    assert {p.name for p in (folder / "templates").iterdir()} >= {
        "report.html.j2",
        "base.html.j2",
        "report.css",
    }


def test_appendix_shows_each_value_from_as_reported_to_used_with_the_temperature_factor(
    runs, parsed
):
    """Every plotted frequency in Hz: value used = value reported x Q10^((T_ref - T)/10), the
    textbook Q10 rule written here, with T_ref and Q10 read from the demo's comparo.toml (25 °C,
    2.0); the summary states both. The in-vivo frequencies of the taxa that taxa.csv calls
    endotherms are used as reported (the temperature policy of docs/methods/temperature.md)."""
    import csv
    import tomllib

    settings = tomllib.loads((runs[0] / "comparo.toml").read_text(encoding="utf-8"))
    t_ref, q10 = settings["reference_temperature_c"], settings["q10"]["frequency_observed"]
    with open(runs[0] / "taxa.csv", newline="", encoding="utf-8") as fh:
        warm = {r["taxon"] for r in csv.DictReader(fh) if r["thermoregulation"] == "endotherm"}
    checked = kept = 0
    for row in parsed.appendix_rows:
        taxon, quantity, reported, temp, factor, used = row[:6]
        if quantity != "frequency_observed" or not reported.endswith(" Hz"):
            continue
        value = float(reported.split()[0])
        assert isinstance(temp, tuple) and isinstance(used, tuple), row
        if taxon in warm:
            assert used[1] == value and "kept as measured" in factor, row
            kept += 1
            continue
        assert used[1] == pytest.approx(value * q10 ** ((t_ref - temp[1]) / 10), rel=1e-9), row
        assert f"Q10 {q10:g}" in factor
        checked += 1
    assert checked >= 40 and kept == len(warm) > 0
    html_text = (runs[1] / "report.html").read_text(encoding="utf-8")
    assert f"reference temperature {t_ref:g} °C" in html_text and f"Q10 = {q10:g}" in html_text


def test_without_settings_the_report_runs_the_default_fits_and_names_the_defaults(tmp_path):
    """No comparo.toml: the default SMA fits run, and the summary says which defaults were used (the
    fits, the reference temperature 25 °C and the catalogue's Q10 values)."""
    data = tmp_path / "demo"
    shutil.copytree(DEMO, data)
    (data / "comparo.toml").unlink()
    res = build_report(data, tmp_path / "out", seed=5, sensitivity_draws=0)
    assert res.ok and res.fits and all(f["method"] == "sma" for f in res.fits)
    from comparo.report import DEFAULT_ANALYSES

    assert [(f["x"], f["y"]) for f in res.fits] == [(a["x"], a["y"]) for a in DEFAULT_ANALYSES][
        : len(res.fits)
    ]
    html_text = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    para = html_text.split('<p id="defaults">', 1)[1].split("</p>", 1)[0]
    assert (
        "the default set" in para
        and "against body mass (SMA)" in para
        and "25 °C" in para
        and "Q10" in para
    )
    assert "Fits from the default set" in html_text
    assert "(default: <code>reference_temperature_c</code> not set)" in html_text


def test_numbers_read_as_people_write_them():
    """4 significant figures without an exponent between 1e-4 and 1e6; integers (a seed, a count) in
    full; booleans as yes/no; a full-precision data-value stays in the cell (common practice for
    tables)."""
    import numpy as np

    from comparo.report.fmt import cell, num

    assert (
        num(20240601) == "20240601" and num(20240601.0) == "20240601" and num(np.int64(57)) == "57"
    )
    assert num(-0.18796) == "-0.188" and num(0.000112) == "0.000112" and num(1410.3) == "1410"
    assert num(3.92e-17) == "3.92e-17" and num(2.0) == "2" and num(float("nan")) == "n/a"
    assert num(True) == "yes" and num(np.bool_(False)) == "no"
    assert str(cell(np.bool_(True))) == "<td>yes</td>"
    assert str(cell(-0.18796)) == '<td class="n" data-value="-0.18796">-0.188</td>'


def test_console_counts_each_figure_once(runs):
    res = runs[3]
    assert res.n_figures == len(list((runs[1] / "figures").glob("*.png")))
    assert f"({res.n_figures} figures, each as PNG and SVG;" in res.summary()


def test_cycles_section_draws_every_trace_and_tabulates_them(runs):
    """Every row of the demo's traces.csv has its loop figure, and the section's per-taxon table
    (tables/cycles_by_taxon.csv) counts the same traces as traces.csv lists per taxon."""
    import pandas as pd

    data, out1 = runs[0], runs[1]
    listed = pd.read_csv(Path(data) / "traces.csv")
    for tid in listed["trace_id"]:
        assert (out1 / "figures" / f"cycle_{tid}.png").is_file(), tid
    html = (out1 / "report.html").read_text(encoding="utf-8")
    assert 'id="cycles"' in html and 'href="#cycles"' in html
    assert html.count("whole cycles; source") == len(listed)
    by_taxon = pd.read_csv(out1 / "tables" / "cycles_by_taxon.csv")
    assert by_taxon["traces"].sum() == len(listed)
    assert dict(by_taxon.groupby("taxon")["traces"].sum()) == dict(listed.groupby("taxon").size())
    per_trace = pd.read_csv(out1 / "tables" / "cycles.csv")
    assert set(per_trace["trace_id"]) == set(listed["trace_id"])
