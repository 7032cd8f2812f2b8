"""Smaller things a new user meets: the rows computed from traces counted in check and audit,
the catalogue's other names in `comparo units` and in check's hints, the units of the
per-taxon table (a sidecar CSV, or the headers of a workbook).

References: the catalogue's synonyms are read from schema/quantities.toml with tomllib (not
through comparo.base.catalog); unit conversions are checked with a pint registry built here; the
rows of observations.csv are counted with the csv module.
"""

from __future__ import annotations

import csv
import json
import tomllib

import openpyxl
import pandas as pd
import pint
import pytest
from support import ROOT, write_dataset

from comparo.cli.main import main

UREG = pint.UnitRegistry()


def run(*args) -> int:
    return main([str(a) for a in args])


def test_check_and_audit_explain_the_rows_computed_from_traces(demo_copy, capsys) -> None:
    with open(demo_copy / "observations.csv", newline="", encoding="utf-8") as fh:
        table_rows = sum(1 for _ in csv.DictReader(fh))
    assert run("check", demo_copy, "--format", "json") == 0
    checked = json.loads(capsys.readouterr().out)
    assert run("audit", demo_copy, "--format", "json") == 0
    audited = json.loads(capsys.readouterr().out)
    traces = audited["rows_read"] - table_rows
    assert traces > 0
    assert (
        checked["rows_read"] == table_rows
        and checked["rows_from_traces"] == traces == audited["rows_from_traces"]
    )
    run("check", demo_copy)
    text = " ".join(capsys.readouterr().out.split())
    assert (
        f"{table_rows} observation row(s) read, and {traces} computed from the traces of "
        f"traces.csv ({table_rows + traces} rows in all"
    ) in text
    run("audit", demo_copy)
    text = " ".join(capsys.readouterr().out.split())
    assert (
        f"rows read {table_rows + traces} ({table_rows} from the observations table, {traces} "
        "computed from the traces"
    ) in text


def test_units_lists_every_synonym_of_the_catalogue(capsys) -> None:
    schema = tomllib.loads((ROOT / "schema" / "quantities.toml").read_text(encoding="utf-8"))
    assert run("units") == 0
    out = capsys.readouterr().out
    synonyms = [s for q in schema.values() if isinstance(q, dict) for s in q.get("synonyms", [])]
    assert synonyms and all(s in out for s in synonyms)


def test_check_names_the_key_of_a_catalogue_synonym(tmp_path, capsys) -> None:
    ds = write_dataset(
        tmp_path / "ds",
        rows=[
            "o1,Apis mellifera,wingbeat frequency,230,Hz,,,,s1,Table 1,reported,,,30",
            "o2,Apis mellifera,Fibre_Radius,12,um,,,,s1,Table 1,reported,,,",
        ],
    )
    assert run("check", ds, "--format", "json") == 2
    hints = [
        p["hint"]
        for p in json.loads(capsys.readouterr().out)["problems"]
        if p["rule"] == "quantity-unknown"
    ]
    assert any("write its key 'frequency_observed'" in h for h in hints)
    assert any("write its key 'fiber_radius'" in h for h in hints)


def test_table_units_beside_the_csv(tiny, tmp_path) -> None:
    """Each value and uncertainty column's unit in table.units.csv is the catalogue's canonical
    unit, and the value converts from the reported one with pint to that unit."""
    assert run("table", tiny, "-o", tmp_path / "t.csv") == 0
    tab = pd.read_csv(tmp_path / "t.csv")
    units = pd.read_csv(tmp_path / "t.units.csv", keep_default_na=False).set_index("column")
    assert list(units.index) == list(tab.columns)
    schema = tomllib.loads((ROOT / "schema" / "quantities.toml").read_text(encoding="utf-8"))
    for q in ("body_mass", "fiber_radius", "frequency_observed"):
        assert UREG.Unit(units.at[q, "unit"]) == UREG.Unit(schema[q]["unit"])
        assert units.at[f"{q}_u", "unit"] == units.at[q, "unit"]
        assert units.at[f"{q}_n", "unit"] == "" and "sources" in units.at[f"{q}_nsrc", "meaning"]
    apis = tab.set_index("taxon").loc["Apis mellifera"]
    assert apis["body_mass"] == pytest.approx(
        UREG.Quantity(100, "mg").to(units.at["body_mass", "unit"]).magnitude
    )
    assert units.at["temperature_c", "unit"] == "degC"


def test_table_as_a_workbook_with_units_in_the_headers(tiny, tmp_path) -> None:
    (tiny / "taxa.csv").write_text(
        "taxon,clade\nApis mellifera,=1+1\nBombus terrestris,@SUM(A1)\n", encoding="utf-8"
    )
    assert run("table", tiny, "-o", tmp_path / "t.csv") == 0
    assert run("table", tiny, "-o", tmp_path / "t.xlsx") == 0
    csv_tab = pd.read_csv(tmp_path / "t.csv")
    units = pd.read_csv(tmp_path / "t.units.csv", keep_default_na=False)
    wb = openpyxl.load_workbook(
        tmp_path / "t.xlsx"
    )  # formulas kept as written: a formula would show as one
    ws = wb["table"]
    header = [c.value for c in ws[1]]
    assert len(header) == len(csv_tab.columns) == ws.max_column and ws.max_row == len(csv_tab) + 1
    assert (
        "body_mass (kg)" in header and "fiber_radius_u (µm)" in header and "body_mass_n" in header
    )
    clade = [ws.cell(row=r, column=header.index("clade") + 1) for r in (2, 3)]
    assert [c.value for c in clade] == ["=1+1", "@SUM(A1)"] and all(
        c.data_type == "s" for c in clade
    )
    col = header.index("body_mass (kg)") + 1
    assert [ws.cell(row=r, column=col).value for r in (2, 3)] == pytest.approx(
        list(csv_tab["body_mass"])
    )
    sheet = [[c.value or "" for c in row] for row in wb["columns"].iter_rows()]
    assert sheet[1:] == units.to_numpy().tolist()


def test_check_prints_a_problem_repeated_on_many_rows_once(tmp_path, capsys) -> None:
    """A source id missing from sources.csv on eight rows: one line naming rows 2-9; the JSON
    still holds one problem per row."""
    rows = [
        f"o{i},Apis mellifera,body_mass,{100 + i},mg,,,,s9,Table 1,reported,,," for i in range(8)
    ]
    ds = write_dataset(tmp_path / "ds", rows=rows)
    assert run("check", ds) == 2
    out = capsys.readouterr().out
    assert out.count("source 's9' is not in the sources table") == 1
    assert "observations.csv:2-9" in out and "(8 rows)" in out
    assert run("check", ds, "--format", "json") == 2
    probs = json.loads(capsys.readouterr().out)["problems"]
    assert sorted(p["row"] for p in probs if p["rule"] == "source-unknown") == list(range(2, 10))
