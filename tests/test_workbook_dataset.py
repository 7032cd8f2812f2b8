"""A dataset workbook (sheets observations, sources) is a dataset for every command that takes
a dataset folder, and reads the tree.nwk and comparo.toml beside it.

The workbook is written with pandas/openpyxl (the reference writer of the format here); the
values are invented for the test (four taxa); each command is compared with the same command
on the same tables kept as a CSV folder, so the expectation comes from the folder reader, not
from the workbook code under test.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest

from comparo.cli.main import main

OBS = """obs_id,taxon,quantity,value,unit,source_id,locator,basis,temperature_c,preparation
o1,Apis mellifera,body_mass,100,mg,s1,Table 1,reported,,
o2,Apis mellifera,frequency_observed,230,Hz,s1,Table 2,reported,30,in_vivo
o3,Bombus terrestris,body_mass,200,mg,s1,Table 1,reported,,
o4,Bombus terrestris,frequency_observed,150,Hz,s1,Table 2,reported,30,in_vivo
o5,Manduca sexta,body_mass,1.6,g,s1,Table 1,reported,,
o6,Manduca sexta,frequency_observed,25,Hz,s1,Table 2,reported,30,in_vivo
o7,Delia radicum,body_mass,1,mg,s1,Table 1,reported,,
o8,Delia radicum,frequency_observed,200,Hz,s1,Table 2,reported,30,in_vivo
o9,Delia radicum,twitch_span,3,ms,s1,p. 3,reported,,
"""
SOURCES = "source_id,citation,year\ns1,Invented A. (2001) A test source,2001\n"
TREE = "((Apis_mellifera:1,Bombus_terrestris:1):2,(Manduca_sexta:2,Delia_radicum:2):1);\n"
# a quantity of the dataset's own: the workbook is only valid when comparo.toml beside it is read
SETTINGS = '[quantities.twitch_span]\nunit = "ms"\nkind = "time"\nrange = [0.1, 1000]\n'


def run(*args) -> int:
    return main([str(a) for a in args])


@pytest.fixture
def pair(tmp_path: Path) -> tuple[Path, Path]:
    """(a CSV dataset folder, the same tables as a workbook in another folder); both have the
    tree and comparo.toml (in the folder; beside the workbook)."""
    folder = tmp_path / "csv"
    folder.mkdir()
    (folder / "observations.csv").write_text(OBS, encoding="utf-8")
    (folder / "sources.csv").write_text(SOURCES, encoding="utf-8")
    book_dir = tmp_path / "book"
    book_dir.mkdir()
    for d in (folder, book_dir):
        (d / "tree.nwk").write_text(TREE, encoding="utf-8")
        (d / "comparo.toml").write_text(SETTINGS, encoding="utf-8")
    book = book_dir / "entry.xlsx"
    with pd.ExcelWriter(book) as w:
        for name in ("observations", "sources"):
            pd.read_csv(folder / f"{name}.csv", dtype=str, keep_default_na=False).to_excel(
                w, sheet_name=name, index=False
            )
    return folder, book


def output(capsys, *args) -> tuple[int, str]:
    code = run(*args)
    return code, capsys.readouterr().out


@pytest.mark.parametrize(
    "command",
    [
        ["check", "--format", "json"],
        ["audit", "--format", "json"],
        ["table"],
        ["derive"],
        ["cycles", "--format", "json"],
        ["units", "--format", "json"],
        ["fit", "--x", "body_mass", "--y", "frequency_observed", "--format", "json"],
        [
            "fit",
            "--x",
            "body_mass",
            "--y",
            "frequency_observed",
            "--method",
            "pgls",
            "--format",
            "json",
        ],
    ],
)
def test_every_reading_command_answers_the_same_on_a_workbook(pair, capsys, command) -> None:
    folder, book = pair
    code_f, out_f = output(capsys, command[0], folder, *command[1:])
    code_b, out_b = output(capsys, command[0], book, *command[1:])
    assert code_f == code_b == 0
    assert out_b.replace(str(book), "DATASET") == out_f.replace(str(folder), "DATASET")
    if command[0] == "fit" and "pgls" in command:  # the tree beside the workbook was found
        assert json.loads(out_b)["method"] == "pgls"


def test_check_reads_the_settings_beside_the_workbook(pair, capsys) -> None:
    """Without comparo.toml beside it, twitch_span is not a quantity: the check fails."""
    _, book = pair
    assert run("check", book) == 0
    (book.parent / "comparo.toml").unlink()
    assert run("check", book) == 2
    captured = capsys.readouterr()
    assert "twitch_span" in captured.out + captured.err


def test_report_export_and_template_on_a_workbook(pair, tmp_path, capsys) -> None:
    _, book = pair
    assert run("report", book, "-o", tmp_path / "rep", "--quiet") == 0
    record = json.loads((tmp_path / "rep" / "run.json").read_text(encoding="utf-8"))
    assert set(record["inputs_sha256"]) == {"entry.xlsx", "tree.nwk", "comparo.toml"}
    assert run("export", book, "--to", "dwc", "-o", tmp_path / "dwc") == 0
    assert run("export", book, "--to", "datapackage", "-o", tmp_path / "dp") == 0
    assert run("template", "-o", tmp_path / "t.xlsx", "--dataset", book) == 0
    import openpyxl

    cat = openpyxl.load_workbook(tmp_path / "t.xlsx", read_only=True)["catalogue"]
    assert any(row[0] == "twitch_span" for row in cat.iter_rows(values_only=True))
