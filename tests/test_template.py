"""comparo template: the entry workbook, and check reading a filled one directly.

The workbook is opened with openpyxl (the reference reader of the format here);
the documented columns are read from docs/data-format.md, not from the code.
"""

from __future__ import annotations

import re
from pathlib import Path

import openpyxl
import pandas as pd
import pint
import pytest
from support import ROOT

from comparo.cli.main import main


def run(*args) -> int:
    return main([str(a) for a in args])


def documented(section: str) -> list[str]:
    """Column names of a table in docs/data-format.md, in the documented order."""
    text = (ROOT / "docs" / "data-format.md").read_text(encoding="utf-8")
    part = text.split(f"## {section}\n", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"^\| `([a-z_0-9]+)` \|", part, flags=re.M)


def documented_values(column: str) -> list[str]:
    text = (ROOT / "docs" / "data-format.md").read_text(encoding="utf-8")
    line = next(ln for ln in text.splitlines() if ln.startswith(f"| `{column}` |"))
    return re.findall(r"`([a-z_0-9]+)`", line.split("one of", 1)[1].split("|", 1)[0])


@pytest.fixture
def template(tmp_path: Path) -> Path:
    path = tmp_path / "entry.xlsx"
    assert run("template", "-o", path) == 0
    return path


def list_values(wb, formula: str) -> list[str]:
    sheet, ref = formula.lstrip("=").split("!")
    return [c.value for row in wb[sheet][ref.replace("$", "")] for c in row]


def validations(ws) -> dict[str, object]:
    """Header name -> the data validation on its column."""
    names = {c.column_letter: c.value for c in ws[1]}
    out = {}
    for dv in ws.data_validations.dataValidation:
        first = str(dv.sqref).split(":")[0]
        out[names[re.match(r"[A-Z]+", first).group(0)]] = dv
    return out


def test_sheets_and_documented_columns_in_order(template: Path) -> None:
    wb = openpyxl.load_workbook(template)
    assert wb.sheetnames[:3] == ["observations", "sources", "taxa"] and "catalogue" in wb.sheetnames
    assert [c.value for c in wb["observations"][1]] == documented("observations")
    assert [c.value for c in wb["sources"][1]] == documented("sources")
    taxa = documented("taxa")  # then the example grouping column
    assert [c.value for c in wb["taxa"][1]][: len(taxa)] == taxa


def test_drop_down_lists(template: Path) -> None:
    from comparo.base.catalog import load_catalog

    wb = openpyxl.load_workbook(template)
    dv = validations(wb["observations"])
    assert set(dv) >= {
        "quantity",
        "unit",
        "basis",
        "uncertainty_kind",
        "preparation",
        "n",
        "uncertainty",
    }
    for col in ("quantity", "unit", "basis", "uncertainty_kind", "preparation"):
        assert dv[col].type == "list" and str(dv[col].sqref).endswith("5001")
    assert list_values(wb, dv["quantity"].formula1) == list(load_catalog())
    for col in ("basis", "uncertainty_kind", "preparation"):
        assert list_values(wb, dv[col].formula1) == documented_values(col)
        assert dv[col].errorStyle in (None, "stop")  # only listed values
    assert dv["unit"].errorStyle == "warning"  # any unit pint reads may be typed
    assert dv["n"].type == "whole" and dv["n"].formula1 == "1"
    # every unit offered is one pint reads (a fresh registry: pint's own definitions)
    ureg = pint.UnitRegistry()
    offered = list_values(wb, dv["unit"].formula1)
    for u in ("nm", "µm", "mm", "mg", "g", "kg", "Pa", "kPa", "MPa", "Hz", "1/s", "ms", "s"):
        assert u in offered
    for u in offered:
        ascii_u = (
            u.replace("µ", "u")
            .replace("²", "**2")
            .replace("³", "**3")
            .replace("·", "*")
            .replace("%", "percent")
        )
        ureg.parse_expression(ascii_u)


def test_catalogue_sheet_is_read_only_and_complete(template: Path) -> None:
    from comparo.base.catalog import load_catalog

    wb = openpyxl.load_workbook(template)
    ws = wb["catalogue"]
    assert ws.protection.sheet and wb["lists"].protection.sheet
    assert not wb["observations"].protection.sheet
    frame = pd.DataFrame(list(ws.values)[1:], columns=[c.value for c in ws[1]])
    cat = load_catalog()
    assert frame["key"].tolist() == list(cat)
    for rec in frame.to_dict("records"):
        q = cat[rec["key"]]
        assert (
            rec["canonical unit"] == q.unit
            and rec["plausible low"] == q.range[0]
            and rec["plausible high"] == q.range[1]
        )


def test_dataset_quantities_are_offered(tmp_path: Path) -> None:
    ds = tmp_path / "ds"
    ds.mkdir()
    (ds / "comparo.toml").write_text(
        '[quantities.twitch_time]\nunit = "ms"\nkind = "time"\nrange = [0.1, 1000]\n',
        encoding="utf-8",
    )
    out = tmp_path / "entry.xlsx"
    assert run("template", "-o", out, "--dataset", ds) == 0
    wb = openpyxl.load_workbook(out)
    assert "twitch_time" in list_values(wb, validations(wb["observations"])["quantity"].formula1)


def fill(
    template: Path,
    dest: Path,
    rows: list[list],
    sources: list[list],
    taxa: list[list] | None = None,
) -> Path:
    wb = openpyxl.load_workbook(template)
    cols = [c.value for c in wb["observations"][1]]
    for r in rows:
        wb["observations"].append([r.get(c) for c in cols])
    for s in sources:
        wb["sources"].append(s)
    for t in taxa or []:
        wb["taxa"].append(t)
    wb.save(dest)
    return dest


ROWS = [
    {
        "obs_id": "o1",
        "taxon": "Apis mellifera",
        "quantity": "body_mass",
        "value": 100,
        "unit": "mg",
        "source_id": "s1",
        "locator": "Table 1",
        "basis": "reported",
    },
    {
        "obs_id": "o2",
        "taxon": "Apis mellifera",
        "quantity": "fiber_radius",
        "value": 12,
        "unit": "µm",
        "uncertainty": 1,
        "uncertainty_kind": "sd",
        "n": 10,
        "source_id": "s1",
        "locator": "Table 2",
        "basis": "reported",
    },
    {
        "obs_id": "o3",
        "taxon": "Bombus terrestris",
        "quantity": "body_mass",
        "value": 0.2,
        "unit": "g",
        "source_id": "s1",
        "locator": "Table 1",
        "basis": "reported",
    },
]
SOURCES = [["s1", "Invented A. (2001) Test source one.", 2001]]


def test_check_and_table_read_a_filled_template(template: Path, tmp_path: Path, capsys) -> None:
    filled = fill(
        template,
        tmp_path / "filled.xlsx",
        ROWS,
        SOURCES,
        [
            ["Apis mellifera", None, None, None, None, "Apidae"],
            ["Bombus terrestris", None, None, None, None, "Apidae"],
        ],
    )
    assert run("check", filled) == 0
    out = tmp_path / "t.csv"
    assert run("table", filled, "-o", out) == 0
    tab = pd.read_csv(out).set_index("taxon")
    ureg = pint.UnitRegistry()
    assert tab.loc["Apis mellifera", "body_mass"] == pytest.approx(
        ureg.Quantity(100, "mg").to("kg").magnitude
    )
    assert tab.loc["Bombus terrestris", "body_mass"] == pytest.approx(
        ureg.Quantity(0.2, "g").to("kg").magnitude
    )
    assert tab.loc["Apis mellifera", "clade"] == "Apidae"


def test_problems_in_a_filled_template_name_sheet_and_cell(
    template: Path, tmp_path: Path, capsys
) -> None:
    rows = [dict(r) for r in ROWS]
    rows[1]["value"] = "abc"  # sheet row 3, column D (value)
    rows[2]["basis"] = "guessed"  # sheet row 4, column K (basis)
    filled = fill(template, tmp_path / "filled.xlsx", rows, SOURCES)
    assert run("check", filled, "--format", "csv") == 2
    probs = pd.read_csv(__import__("io").StringIO(capsys.readouterr().out))
    errors = probs[probs.severity == "error"]
    assert set(errors.file) == {"filled.xlsx[observations]"}
    messages = " ".join(errors.message)
    assert "cell D3:" in messages and "cell K4:" in messages


def test_workbook_without_sources_sheet(tmp_path: Path, capsys) -> None:
    wb = openpyxl.Workbook()
    wb.active.title = "observations"
    wb.active.append(["obs_id", "taxon"])
    wb.save(tmp_path / "w.xlsx")
    assert run("check", tmp_path / "w.xlsx") == 2
    assert "no sheet 'sources'" in capsys.readouterr().out


@pytest.mark.parametrize(
    "case", ["not-xlsx", "stdout", "dataset-missing", "dataset-bad-toml", "inside-dataset"]
)
def test_template_bad_requests_exit_2(tmp_path: Path, case: str, capsys) -> None:
    ds = tmp_path / "ds"
    ds.mkdir()
    (ds / "observations.csv").write_text("obs_id\n", encoding="utf-8")
    args = {
        "not-xlsx": ["-o", tmp_path / "t.csv"],
        "stdout": ["-o", "-"],
        "dataset-missing": ["-o", tmp_path / "t.xlsx", "--dataset", tmp_path / "nope"],
        "dataset-bad-toml": ["-o", tmp_path / "t.xlsx", "--dataset", ds],
        "inside-dataset": ["-o", ds / "t.xlsx", "--dataset", ds],
    }[case]
    if case == "dataset-bad-toml":
        (ds / "comparo.toml").write_text("[quantities.x]\nunit = 'blorp'\n", encoding="utf-8")
    assert run("template", *args) == 2
    captured = capsys.readouterr()
    assert "internal error" not in captured.err and captured.err.strip()
    assert not (tmp_path / "t.xlsx").exists() and not (ds / "t.xlsx").exists()


def test_fit_reads_a_filled_template(template: Path, tmp_path: Path, capsys) -> None:
    """OLS slope on log10 axes from the workbook equals numpy's least-squares polyfit of the same
    numbers."""
    import json

    import numpy as np

    data = {
        "Apis mellifera": (100e-6, 230),
        "Bombus terrestris": (200e-6, 150),
        "Musca domestica": (12e-6, 190),
        "Vespa crabro": (500e-6, 120),
    }
    rows = []
    for i, (t, (m, f)) in enumerate(data.items()):
        rows.append(
            {
                "obs_id": f"m{i}",
                "taxon": t,
                "quantity": "body_mass",
                "value": m,
                "unit": "kg",
                "source_id": "s1",
                "locator": "T1",
                "basis": "reported",
            }
        )
        rows.append(
            {
                "obs_id": f"f{i}",
                "taxon": t,
                "quantity": "frequency_observed",
                "value": f,
                "unit": "Hz",
                "source_id": "s1",
                "locator": "T1",
                "basis": "reported",
                "temperature_c": 25,
            }
        )
    filled = fill(template, tmp_path / "filled.xlsx", rows, SOURCES)
    assert (
        run(
            "fit",
            filled,
            "--x",
            "body_mass",
            "--y",
            "frequency_observed",
            "--method",
            "ols",
            "--format",
            "json",
        )
        == 0
    )
    res = json.loads(capsys.readouterr().out)
    x, y = np.log10([m for m, _ in data.values()]), np.log10([f for _, f in data.values()])
    assert res["n"] == 4 and res["slope"] == pytest.approx(np.polyfit(x, y, 1)[0], rel=1e-9)
