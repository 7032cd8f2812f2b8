"""comparo import: wide tables (CSV, TSV, XLSX) to a dataset folder.

Unit conversions are checked against a fresh pint registry built in the test (an
independent route: pint's own definitions, not comparo.base.units); the headers and
cells are made by the tests (CSV text, or workbooks written with openpyxl).
"""

from __future__ import annotations

import csv
import io
from pathlib import Path

import openpyxl
import pandas as pd
import pint
import pytest
from support import tree_hash

from comparo.cli.main import main

UREG = pint.UnitRegistry()

HEADER = [
    "Species",
    "Clade",
    "Source",
    "Table",
    "Temperature (°C)",
    "Body mass (g)",
    "Body mass SD (mg)",
    "Fibre diameter [µm]",
    "Fiber length (mm)",
    "Wingbeat frequency (Hz)",
    "Young's modulus (MPa)",
    "n",
]
ROWS = [
    [
        "Apis mellifera",
        "Hymenoptera",
        "s1",
        "Table 1",
        "30",
        "0.1",
        "12",
        "25",
        "1.5",
        "230",
        "0.5",
        "10",
    ],
    [
        "Bombus terrestris",
        "Hymenoptera",
        "s2",
        "Table 2",
        "25",
        "0.2",
        "",
        "",
        "2.5",
        "150",
        "",
        "",
    ],
    ["Musca domestica", "Diptera", "s1", "Fig. 3", "20", "0.012", "1", "18", "", "190", "", "4"],
]
CANONICAL = {
    "body_mass": "kg",
    "fiber_radius": "um",
    "fiber_length": "mm",
    "frequency_observed": "Hz",
    "elastic_modulus": "kPa",
}


def write_text(path: Path, rows: list[list[str]], delimiter: str = ",") -> Path:
    buf = io.StringIO()
    csv.writer(buf, delimiter=delimiter, lineterminator="\n").writerows(rows)
    path.write_text(buf.getvalue(), encoding="utf-8")
    return path


def write_xlsx(
    path: Path, rows: list[list], sheet: str = "Sheet1", first: str | None = None
) -> Path:
    wb = openpyxl.Workbook()
    ws = wb.active
    if first:
        ws.title = first
        ws.append(["nothing here"])
        ws = wb.create_sheet(sheet)
    else:
        ws.title = sheet
    for r in rows:
        ws.append([(float(v) if _is_number(v) else v) if isinstance(v, str) else v for v in r])
    wb.save(path)
    return path


def _is_number(v: str) -> bool:
    try:
        float(v)
        return True
    except ValueError:
        return False


def run(*args: str) -> int:
    return main([str(a) for a in args])


def imported(tmp_path: Path, wide: Path, *extra: str, name: str = "out") -> Path:
    out = tmp_path / name
    assert run("import", wide, "-o", out, *extra) == 0
    return out


def table(tmp_path: Path, folder: Path) -> pd.DataFrame:
    dest = tmp_path / f"{folder.name}-table.csv"
    assert run("table", folder, "--no-temperature", "-o", dest) == 0
    return pd.read_csv(dest).set_index("taxon")


def expected_canonical() -> dict[tuple[str, str], float]:
    """The wide cells converted by pint directly: (taxon, quantity) -> value in canonical unit."""
    out = {}
    cols = {
        "Body mass (g)": ("body_mass", "g", 1.0),
        "Fibre diameter [µm]": ("fiber_radius", "um", 0.5),
        "Fiber length (mm)": ("fiber_length", "mm", 1.0),
        "Wingbeat frequency (Hz)": ("frequency_observed", "Hz", 1.0),
        "Young's modulus (MPa)": ("elastic_modulus", "MPa", 1.0),
    }
    for r in ROWS:
        for h, (key, unit, factor) in cols.items():
            cell = r[HEADER.index(h)]
            if cell:
                # radius = diameter / 2 (the catalogue's fiber_diameter rule); the rest: unit change
                # only
                out[(r[0], key)] = (
                    factor * UREG.Quantity(float(cell), unit).to(CANONICAL[key]).magnitude
                )
    return out


def check_round_trip(tmp_path: Path, out: Path) -> None:
    assert run("check", out) == 0
    tab = table(tmp_path, out)
    want = expected_canonical()
    for (taxon, key), v in want.items():
        assert tab.loc[taxon, key] == pytest.approx(v, rel=1e-12), (taxon, key)
    # every filled trait cell is one row, empty cells none
    obs = pd.read_csv(out / "observations.csv")
    assert len(obs) == len(want)


def test_csv_round_trip_gives_pint_values_in_canonical_units(tmp_path: Path) -> None:
    wide = write_text(tmp_path / "wide.csv", [HEADER, *ROWS])
    before = wide.read_bytes()
    out = imported(tmp_path, wide)
    check_round_trip(tmp_path, out)
    obs = pd.read_csv(out / "observations.csv", dtype=str, keep_default_na=False)
    apis = obs[(obs.taxon == "Apis mellifera") & (obs.quantity == "body_mass")].iloc[0]
    # the SD column is in mg, the value in g: the spread is written in the value's unit
    assert apis.unit == "g" and apis.uncertainty_kind == "sd"
    assert float(apis.uncertainty) == pytest.approx(
        UREG.Quantity(12, "mg").to("g").magnitude, rel=1e-12
    )
    assert (
        apis.n == "10"
        and apis.temperature_c == "30"
        and apis.locator == "Table 1"
        and apis.basis == "reported"
    )
    taxa = pd.read_csv(out / "taxa.csv")
    assert dict(zip(taxa.taxon, taxa.clade, strict=True))["Musca domestica"] == "Diptera"
    assert wide.read_bytes() == before  # the input is never modified
    src = pd.read_csv(out / "sources.csv")
    assert (
        sorted(src.source_id) == ["s1", "s2"]
        and src.citation.str.startswith("NEEDS CITATION").all()
    )
    import comparo

    found = comparo.check(out).problems
    assert sorted(found[found.rule == "citation-stub"].value) == [
        "s1",
        "s2",
    ]  # a warning until replaced


def test_tsv_with_bracket_units_and_other_spellings(tmp_path: Path) -> None:
    header = [
        "TAXON",
        "reference",
        "Where",
        "temperature_c",
        "body_mass (g)",
        "SD Body mass (mg)",
        "fibre diameter (um)",
        "Fiber Length [mm]",
        "wing-beat frequency [Hz]",
        "Youngs modulus (MPa)",
        "N",
    ]
    rows = [header] + [[r[0], r[2], r[3], r[4], *r[5:]] for r in ROWS]
    out = imported(tmp_path, write_text(tmp_path / "wide.tsv", rows, "\t"))
    check_round_trip(tmp_path, out)


def test_xlsx_number_cells_and_sheet_option(tmp_path: Path) -> None:
    wide = write_xlsx(tmp_path / "wide.xlsx", [HEADER, *ROWS], sheet="traits", first="notes")
    assert run("import", wide, "-o", tmp_path / "first") == 2  # the first sheet holds no traits
    assert not (tmp_path / "first").exists()
    out = imported(tmp_path, wide, "--sheet", "traits")
    check_round_trip(tmp_path, out)
    assert 'sheet = "traits"' in (out / "import.toml").read_text()


def test_non_number_cell_is_an_error_at_its_coordinates(tmp_path: Path, capsys) -> None:
    rows = [HEADER, *[list(r) for r in ROWS]]
    rows[2][HEADER.index("Fiber length (mm)")] = "<2"  # row 3 of the sheet, column I
    rows[3][HEADER.index("Body mass (g)")] = "12 mg"  # row 4, column F
    wide = write_xlsx(tmp_path / "wide.xlsx", rows)
    assert run("import", wide, "-o", tmp_path / "out") == 2
    err = capsys.readouterr().err
    assert "cell I3 is not a number" in err and "cell F4 is not a number" in err
    assert "unit typed into the cell" in err
    assert not (tmp_path / "out").exists()


def test_value_rules_of_check_are_reported_at_the_wide_cell(tmp_path: Path, capsys) -> None:
    rows = [HEADER, *[list(r) for r in ROWS]]
    rows[1][HEADER.index("Body mass (g)")] = (
        "-0.1"  # column F, sheet row 2: check's positive-value rule
    )
    wide = write_text(tmp_path / "wide.csv", rows)
    assert run("import", wide, "-o", tmp_path / "out") == 2
    err = capsys.readouterr().err
    assert "wide.csv, row 2, column 'Body mass (g)'" in err and "cell F2:" in err


def test_empty_cells_make_no_row_and_missing_words_are_counted(tmp_path: Path, capsys) -> None:
    rows = [HEADER, *[list(r) for r in ROWS]]
    rows[1][HEADER.index("Fiber length (mm)")] = "n.d."
    out = imported(tmp_path, write_text(tmp_path / "wide.csv", rows))
    obs = pd.read_csv(out / "observations.csv")
    assert len(obs) == len(expected_canonical()) - 1
    assert "1 cell(s) say the value is missing (I2)" in capsys.readouterr().err


def test_ambiguous_header_exits_2_with_candidates_and_a_map_file(tmp_path: Path, capsys) -> None:
    rows = [
        ["Species", "Source", "Length (mm)", "Wing colour"],
        ["Apis mellifera", "s1", "2.5", "brown"],
    ]
    wide = write_text(tmp_path / "wide.csv", rows)
    out = tmp_path / "out"
    assert run("import", wide, "-o", out) == 2
    err = capsys.readouterr().err
    assert "ambiguous" in err and "fiber_length" in err and "sarcomere_length" in err
    assert "Wing colour" in err and "unknown" in err
    assert not out.exists()
    map_file = tmp_path / "out-import-map.csv"
    recs = list(csv.DictReader(map_file.open(encoding="utf-8")))
    assert [r["header"] for r in recs] == rows[0]
    by = {r["header"]: r for r in recs}
    assert by["Species"]["role"] == "taxon" and by["Length (mm)"]["role"] == ""
    assert by["Length (mm)"]["candidates"] == "fiber_length; sarcomere_length"
    by["Length (mm)"].update(role="value", key="sarcomere_length", unit="um")  # the curator decides
    by["Wing colour"].update(role="ignore")
    with map_file.open("w", encoding="utf-8", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(recs[0]))
        w.writeheader()
        w.writerows(by.values())
    assert run("import", wide, "-o", out, "--map", map_file) == 0
    obs = pd.read_csv(out / "observations.csv")
    assert obs.quantity.tolist() == ["sarcomere_length"] and obs.unit.tolist() == ["um"]
    # the decision is recorded, and import.toml re-runs the same import
    assert run("import", wide, "-o", tmp_path / "again", "--map", out / "import.toml") == 0
    assert (tmp_path / "again" / "observations.csv").read_bytes() == (
        out / "observations.csv"
    ).read_bytes()


def test_decimal_comma_semicolon_export(tmp_path: Path, capsys) -> None:
    rows = [
        ["Species", "Source", "Body mass (g)", "Fibre radius (µm)"],
        ["Apis mellifera", "s1", "0,1", "12,5"],
        ["Bombus terrestris", "s1", "1.234,5", "15"],
    ]
    wide = write_text(tmp_path / "wide.csv", rows, ";")
    assert run("import", wide, "-o", tmp_path / "refused") == 2
    assert "--decimal-comma" in capsys.readouterr().err
    out = imported(tmp_path, wide, "--decimal-comma")
    tab = table(tmp_path, out)
    assert tab.loc["Apis mellifera", "body_mass"] == pytest.approx(
        UREG.Quantity(0.1, "g").to("kg").magnitude
    )
    assert tab.loc["Bombus terrestris", "body_mass"] == pytest.approx(
        UREG.Quantity(1234.5, "g").to("kg").magnitude
    )
    assert tab.loc["Apis mellifera", "fiber_radius"] == pytest.approx(12.5)


def test_obs_ids_are_stable_across_reruns_and_row_order(tmp_path: Path) -> None:
    a = imported(tmp_path, write_text(tmp_path / "a.csv", [HEADER, *ROWS]), name="a")
    b = imported(tmp_path, write_text(tmp_path / "b.csv", [HEADER, *ROWS[::-1]]), name="b")
    ids = [
        pd.read_csv(f / "observations.csv").set_index(["taxon", "quantity"]).obs_id.sort_index()
        for f in (a, b)
    ]
    assert ids[0].is_unique and ids[0].equals(ids[1])


def test_output_folder_refused_when_not_empty_unless_overwrite(tmp_path: Path, capsys) -> None:
    wide = write_text(tmp_path / "wide.csv", [HEADER, *ROWS])
    out = tmp_path / "out"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    assert run("import", wide, "-o", out) == 2
    assert "not empty" in capsys.readouterr().err and not (out / "observations.csv").exists()
    assert run("import", wide, "-o", out, "--overwrite") == 0
    assert (out / "keep.txt").read_text() == "mine" and (out / "observations.csv").is_file()
    assert (
        run("import", wide, "-o", out, "--overwrite") == 0
    )  # an imported folder can be re-imported into


def test_sources_file_is_copied_and_ids_checked(tmp_path: Path, capsys) -> None:
    wide = write_text(tmp_path / "wide.csv", [HEADER, *ROWS])
    src = tmp_path / "refs.csv"
    src.write_text("source_id,citation,year\ns1,Invented A. (2001) One,2001\n", encoding="utf-8")
    assert run("import", wide, "-o", tmp_path / "out", "--sources", src) == 2
    err = capsys.readouterr().err
    assert "s2" in err and "cell C3" in err  # Bombus's source id, column C row 3
    src.write_text(
        "source_id,citation,year\ns1,Invented A. (2001) One,2001\ns2,Invented B. (2002) Two,2002\n",
        encoding="utf-8",
    )
    out = imported(tmp_path, wide, "--sources", src)
    assert (out / "sources.csv").read_bytes() == src.read_bytes()


def test_per_trait_source_and_se_columns(tmp_path: Path) -> None:
    rows = [
        [
            "Species",
            "Body mass (g)",
            "Body mass SE (g)",
            "Body mass source",
            "Frequency (Hz)",
            "Frequency source",
            "Frequency n",
        ],
        ["Apis mellifera", "0.1", "0.01", "s1", "230", "s2", "7"],
    ]
    out = imported(tmp_path, write_text(tmp_path / "wide.csv", rows))
    obs = pd.read_csv(out / "observations.csv", dtype=str, keep_default_na=False).set_index(
        "quantity"
    )
    assert (
        obs.loc["body_mass", "source_id"] == "s1"
        and obs.loc["body_mass", "uncertainty_kind"] == "se"
    )
    assert (
        obs.loc["frequency_observed", "source_id"] == "s2"
        and obs.loc["frequency_observed", "n"] == "7"
    )
    assert obs.loc["body_mass", "n"] == ""


def test_catalogue_synonyms_are_valid_and_unique() -> None:
    """Every synonym names one quantity only (a shared one would make headers ambiguous)."""
    from comparo.base.catalog import load_catalog
    from comparo.reading.sheets import NameIndex

    index = NameIndex.of(load_catalog())
    shared = {n: ks for n, ks in index.names.items() if len(ks) > 1}
    assert shared == {}


HOSTILE = {
    "binary": b"\x00\x01\x02PK garbage\xff\xfe",
    "empty": b"",
    "header-only": b"Species,Source,Body mass (g)\n",
    "duplicate-header": b"Species,Source,Body mass (g),body mass (g)\nApis mellifera,s1,1,2\n",
    "bad-unit": b"Species,Source,Body mass (blorp)\nApis mellifera,s1,1\n",
    "wrong-kind": b"Species,Source,Body mass (kPa)\nApis mellifera,s1,1\n",
    "no-unit": b"Species,Source,Body mass\nApis mellifera,s1,1\n",
    "no-taxon-column": b"Source,Body mass (g)\ns1,1\n",
    "no-source": b"Species,Body mass (g)\nApis mellifera,1\n",
    "taxon-missing": b"Species,Source,Body mass (g)\n,s1,1\n",
    "huge": b"Species,Source,Body mass (g)\nApis mellifera,s1,1e400\n",
    "tiny": b"Species,Source,Body mass (g)\nApis mellifera,s1,1e-400\n",
    "plus-minus": "Species,Source,Body mass (g)\nApis mellifera,s1,12 ± 3\n".encode(),
    "stray-cell": b"Species,Source,Body mass (g)\nApis mellifera,s1,1,99\n",
    "unpaired-sd": b"Species,Source,Body mass (g),Fiber length SD (mm)\nApis mellifera,s1,1,2\n",
    "control-char": b"Species,Source,Body mass (g)\nApis\x07 mellifera,s1,1\n",
    "zip-as-csv": b"PK\x03\x04 not really a workbook",
    "nan-text": b"Species,Source,Body mass (g)\nApis mellifera,s1,inf\n",
}


@pytest.mark.parametrize("case", sorted(HOSTILE))
def test_hostile_wide_tables_exit_2_not_3(tmp_path: Path, case: str, capsys) -> None:
    wide = tmp_path / "in" / "wide.csv"
    wide.parent.mkdir()
    wide.write_bytes(HOSTILE[case])
    before = tree_hash(wide.parent)
    assert run("import", wide, "-o", tmp_path / "out") == 2
    err = capsys.readouterr().err
    assert err.strip() and "internal error" not in err and "Traceback" not in err
    assert not (tmp_path / "out").exists()
    assert tree_hash(wide.parent) == before  # the input is never modified


@pytest.mark.parametrize(
    "case",
    [
        "stdout",
        "output-is-a-file",
        "output-is-the-input",
        "broken-xlsx",
        "missing-sheet",
        "map-garbage",
        "map-bad-role",
        "missing-wide",
        "folder-as-wide",
        "formula-no-value",
    ],
)
def test_hostile_options_exit_2_not_3(tmp_path: Path, case: str, capsys) -> None:
    wide = write_xlsx(tmp_path / "wide.xlsx", [HEADER, *ROWS])
    args = ["import", wide, "-o", tmp_path / "out"]
    if case == "stdout":
        args[3] = "-"
    elif case == "output-is-a-file":
        (tmp_path / "f").write_text("x")
        args[3] = tmp_path / "f"
    elif case == "output-is-the-input":
        args[3] = wide
    elif case == "broken-xlsx":
        (tmp_path / "bad.xlsx").write_bytes(b"PK\x03\x04 truncated")
        args[1] = tmp_path / "bad.xlsx"
    elif case == "missing-sheet":
        args += ["--sheet", "nope"]
    elif case == "map-garbage":
        (tmp_path / "m.csv").write_bytes(b"\x00\x00\xff")
        args += ["--map", tmp_path / "m.csv"]
    elif case == "map-bad-role":
        (tmp_path / "m.csv").write_text(
            "header,role,key,unit\nSpecies,speciez,,\nNot a header,taxon,,\n", encoding="utf-8"
        )
        args += ["--map", tmp_path / "m.csv"]
    elif case == "missing-wide":
        args[1] = tmp_path / "nothing.csv"
    elif case == "folder-as-wide":
        args[1] = tmp_path
    elif case == "formula-no-value":
        wb = openpyxl.load_workbook(wide)
        wb.active["F2"] = "=F3*2"  # openpyxl saves no result for a formula
        wb.save(wide)
    assert run(*args) == 2
    err = capsys.readouterr().err
    assert err.strip() and "internal error" not in err
    assert not Path("-").exists() and (tmp_path / "wide.xlsx").is_file()
    if case == "formula-no-value":
        assert "F2" in err and "formula" in err
    if case == "map-bad-role":
        assert "speciez" in err and "Not a header" in err


def test_trait_source_falls_back_to_the_row_source(tmp_path: Path) -> None:
    rows = [
        ["Species", "Source", "Body mass (g)", "Frequency (Hz)", "Frequency source", "Clade"],
        ["Apis mellifera", "s1", "0.1", "230", "s2", "Apidae"],
        ["Bombus terrestris", "s1", "0.2", "150", "", "Apidae"],
    ]
    wide = write_text(tmp_path / "wide.csv", rows)
    map_file = tmp_path / "m.csv"
    map_file.write_text(
        "header,role,key\nClade,taxa,\n", encoding="utf-8"
    )  # key defaults to the header's name
    out = imported(tmp_path, wide, "--map", map_file)
    obs = pd.read_csv(out / "observations.csv").set_index(["taxon", "quantity"])
    assert obs.loc[("Apis mellifera", "frequency_observed"), "source_id"] == "s2"
    assert obs.loc[("Bombus terrestris", "frequency_observed"), "source_id"] == "s1"
    assert pd.read_csv(out / "taxa.csv").columns.tolist() == ["taxon", "clade"]


def test_demo_wide_companion_imports_to_the_demo_values(tmp_path: Path) -> None:
    """The wide companion (demo_tables/make_wide.py, seeded) matches its generator, imports
    cleanly with the demo's sources, and every imported value is, in canonical units, the
    demo row it was laid out from (same taxon, quantity and source)."""
    import importlib.util

    from support import DEMO, ROOT

    import comparo

    spec = importlib.util.spec_from_file_location(
        "make_wide", ROOT / "demo_tables" / "make_wide.py"
    )
    make_wide = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(make_wide)
    assert make_wide.main(["--check"]) == 0
    out = imported(
        tmp_path,
        ROOT / "demo_tables" / "synthetic_cyclers_wide.csv",
        "--sources",
        DEMO / "sources.csv",
    )
    assert run("check", out) == 0
    got = comparo.load(out).observations
    demo = comparo.load(DEMO).observations
    demo = demo[demo["basis"] == "reported"].drop_duplicates(["taxon", "quantity_key", "source_id"])
    ref = demo.set_index(["taxon", "quantity_key", "source_id"])["value_canonical"]
    keys = list(zip(got["taxon"], got["quantity_key"], got["source_id"], strict=True))
    assert len(keys) > 250
    for k, v in zip(keys, got["value_canonical"], strict=True):
        assert v == pytest.approx(ref[k], rel=1e-9), k  # the companion writes 10 significant digits


def test_json_result_lists_every_decision(tmp_path: Path, capsys) -> None:
    import json

    wide = write_text(tmp_path / "wide.csv", [HEADER, *ROWS])
    assert run("import", wide, "-o", tmp_path / "out", "--format", "json") == 0
    res = json.loads(capsys.readouterr().out)
    assert res["observations"] == len(expected_canonical()) and res["rows_read"] == 3
    by = {c["header"]: c for c in res["columns"]}
    assert [c["header"] for c in res["columns"]] == HEADER
    assert by["Fibre diameter [µm]"] == {
        "header": "Fibre diameter [µm]",
        "column": "H",
        "role": "value",
        "key": "fiber_diameter",
        "unit": "µm",
        "basis": "",
        "how": "key",
    }
    assert by["Body mass SD (mg)"]["role"] == "sd" and by["Body mass SD (mg)"]["key"] == "body_mass"
    assert by["Young's modulus (MPa)"]["how"] == "synonym"


@pytest.mark.parametrize("spread", ["Body mass ± (g)", "Body mass +/- (g)", "Body mass error (g)"])
def test_a_spread_of_unstated_kind_is_not_taken_for_values(
    tmp_path: Path, spread: str, capsys
) -> None:
    rows = [["Species", "Source", "Body mass (g)", spread], ["Apis mellifera", "s1", "0.1", "0.01"]]
    assert run("import", write_text(tmp_path / "wide.csv", rows), "-o", tmp_path / "out") == 2
    err = capsys.readouterr().err
    assert "not which kind" in err and "sd:body_mass" in err


def test_two_columns_of_one_quantity_need_a_decision(tmp_path: Path, capsys) -> None:
    rows = [
        ["Species", "Source", "Body mass (g)", "Mass (mg)"],
        ["Apis mellifera", "s1", "0.1", "100"],
    ]
    wide = write_text(tmp_path / "wide.csv", rows)
    assert run("import", wide, "-o", tmp_path / "out") == 2
    assert "2 columns hold body_mass" in capsys.readouterr().err
    map_file = tmp_path / "m.csv"
    map_file.write_text(
        "header,role,key,unit\nBody mass (g),value,body_mass,g\nMass (mg),value,body_mass,mg\n",
        encoding="utf-8",
    )
    out = imported(tmp_path, wide, "--map", map_file)
    assert len(pd.read_csv(out / "observations.csv")) == 2
