"""comparo import on sheets laid out as curators lay them out: a title row above the headers,
values written ``12.5 ± 0.3``, units as journals print them (``s-1``, ``mN mm-2``), headers
named by one-letter symbols, a whole column in the wrong unit, and problems repeated on many
rows.

Every sheet is invented for the test. Unit conversions are checked against a pint registry
built here from pint's own definitions with the units spelled out in pint's syntax
(``mN/mm**2``), an independent route from comparo's reading of the journal spelling.
"""

from __future__ import annotations

import csv
import io
from pathlib import Path

import openpyxl
import pandas as pd
import pint
import pytest

from comparo.base import units
from comparo.cli.main import main
from comparo.curation.importing import import_wide
from comparo.reading.sheets import NameIndex, match_header

UREG = pint.UnitRegistry()

TITLE = ["Table S1. Flight muscle of four insects (mean ± SD)", "", "", "", ""]
HEADER = ["Species", "Source", "Body mass (g)", "Wingbeat frequency (Hz)", "Fibre radius (µm)"]
ROWS = [
    ["Apis mellifera", "s1", "0.1", "230", "12"],
    ["Bombus terrestris", "s1", "0.2", "150", "14"],
    ["Manduca sexta", "s2", "1.6", "25", "20"],
    ["Delia radicum", "s2", "0.001", "200", "5"],
]


def run(*args) -> int:
    return main([str(a) for a in args])


def write_csv(path: Path, rows: list[list[str]]) -> Path:
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerows(rows)
    path.write_text(buf.getvalue(), encoding="utf-8")
    return path


def observations(folder: Path) -> pd.DataFrame:
    return pd.read_csv(folder / "observations.csv", dtype=str, keep_default_na=False)


# ----------------------------------------------------------------------------- title rows


@pytest.mark.parametrize("kind", ["csv", "xlsx"])
def test_a_title_row_is_one_message_naming_the_header_row(tmp_path, capsys, kind) -> None:
    """A title and a blank row above the headers: one error saying 'use --header-row 3', not
    one 'stray delimiter' per cell; with --header-row 3 the sheet imports."""
    table = [TITLE, [""] * 5, HEADER, *ROWS]
    if kind == "csv":
        wide = write_csv(tmp_path / "wide.csv", table)
    else:
        wb = openpyxl.Workbook()
        for r in table:
            wb.active.append([c or None for c in r])
        wide = tmp_path / "wide.xlsx"
        wb.save(wide)
    assert run("import", wide, "-o", tmp_path / "out") == 2
    err = capsys.readouterr().err
    assert err.count("error:") == 1 and "[title-row]" in err and "use --header-row 3" in err
    assert "cell-without-header" not in err and not (tmp_path / "out").exists()
    assert run("import", wide, "-o", tmp_path / "out", "--header-row", "3") == 0
    obs = observations(tmp_path / "out")
    assert len(obs) == 12 and set(obs["taxon"]) == {r[0] for r in ROWS}
    assert "header_row = 3" in (tmp_path / "out" / "import.toml").read_text(encoding="utf-8")


def test_header_row_out_of_the_table_or_blank(tmp_path, capsys) -> None:
    wide = write_csv(tmp_path / "wide.csv", [TITLE, [""] * 5, HEADER, *ROWS])
    assert run("import", wide, "-o", tmp_path / "a", "--header-row", "40") == 2
    assert run("import", wide, "-o", tmp_path / "b", "--header-row", "2") == 2
    assert run("import", wide, "-o", tmp_path / "c", "--header-row", "0") == 2
    err = capsys.readouterr().err
    assert "has 7 row(s)" in err and "row 2 (--header-row) is blank" in err and "1 or more" in err


# ----------------------------------------------------------------------------- ± cells

SPELLINGS = [
    "12.5 ± 0.3",
    "12.5±0.3",
    "12.5 +/- 0.3",
    "12.5+/-0.3",
    "12.5 +- 0.3",
    "12.5 + / - 0.3",
]


@pytest.mark.parametrize("kind", ["sd", "se", "ci95", "range_half"])
def test_plus_minus_cells_in_every_spelling(tmp_path, kind) -> None:
    rows = [["Species", "Source", "Fibre radius (µm)"]]
    rows += [[f"Genus species{i}", "s1", cell] for i, cell in enumerate(SPELLINGS)]
    wide = write_csv(tmp_path / "wide.csv", rows)
    import_wide(wide, tmp_path / "out", plus_minus=kind)
    obs = observations(tmp_path / "out")
    assert list(obs["value"]) == ["12.5"] * len(SPELLINGS)
    assert list(obs["uncertainty"]) == ["0.3"] * len(SPELLINGS)
    assert set(obs["uncertainty_kind"]) == {kind}


def test_plus_minus_refused_without_the_option_and_the_hint_names_it(tmp_path, capsys) -> None:
    wide = write_csv(
        tmp_path / "wide.csv",
        [["Species", "Source", "Body mass (g)"], ["Apis mellifera", "s1", "0.1 ± 0.01"]],
    )
    assert run("import", wide, "-o", tmp_path / "out") == 2
    err = capsys.readouterr().err
    assert "cell C2 is not a number" in err and "--plus-minus" in err


def test_plus_minus_with_a_spread_column_too_and_a_bad_spread(tmp_path, capsys) -> None:
    rows = [
        ["Species", "Source", "Body mass (g)", "Body mass SD (g)"],
        ["Apis mellifera", "s1", "0.1 ± 0.01", "0.02"],
        ["Bombus terrestris", "s1", "0.2 ± x", ""],
    ]
    wide = write_csv(tmp_path / "wide.csv", rows)
    assert run("import", wide, "-o", tmp_path / "out", "--plus-minus", "sd") == 2
    err = capsys.readouterr().err
    assert (
        "[spread-twice]" in err
        and "cell C3 is a value ± spread whose the spread after ± is not a number" in err
    )


# ----------------------------------------------------------------------------- units

JOURNAL = [
    ("s-1", "1/s", "1/s"),
    ("s^-1", "1/s", "1/s"),
    ("s\u22121", "1/s", "1/s"),
    ("mm\u22122", "1/mm**2", "1/m**2"),
    ("min-1", "1/min", "1/s"),
    ("µm2", "µm**2", "nm**2"),
    ("m s-1", "m/s", "mm/s"),
    ("mN mm-2", "mN/mm**2", "kPa"),
    ("µm2 s-1", "µm**2/s", "m**2/s"),
    ("kg m-3", "kg/m**3", "g/cm**3"),
]


@pytest.mark.parametrize(("journal", "spelled", "target"), JOURNAL)
def test_units_as_journals_print_them(journal, spelled, target) -> None:
    """The journal spelling converts as pint's own spelled-out unit does."""
    want = UREG.Quantity(1, spelled).to(target).magnitude
    assert units.conversion_factor(journal, target) == pytest.approx(want, rel=1e-12)


def test_unreadable_units_never_name_a_library_exception() -> None:
    for bad in ("blorp", "mm--2", "s-"):
        with pytest.raises(units.UnitParseError) as info:
            units.check_unit(bad)
        assert "Error" not in str(info.value)


def test_journal_units_in_headers_import(tmp_path) -> None:
    rows = [
        [
            "Species",
            "Source",
            "Stiffness (mN mm-2)",
            "Detach rate (s-1)",
            "Wingbeat frequency (min-1)",
        ],
        ["Apis mellifera", "s1", "50", "120", "600"],
    ]
    wide = write_csv(tmp_path / "wide.csv", rows)
    map_file = write_csv(
        tmp_path / "map.csv",
        [["header", "role", "key"], ["Stiffness (mN mm-2)", "value", "elastic_modulus"]],
    )
    import_wide(wide, tmp_path / "out", map_file=map_file)
    assert run("table", tmp_path / "out", "--no-temperature", "-o", tmp_path / "t.csv") == 0
    tab = pd.read_csv(tmp_path / "t.csv")
    assert tab["elastic_modulus"].iat[0] == pytest.approx(
        UREG.Quantity(50, "mN/mm**2").to("kPa").magnitude
    )
    assert tab["detach_rate"].iat[0] == pytest.approx(120)
    assert tab["frequency_observed"].iat[0] == pytest.approx(
        UREG.Quantity(600, "1/min").to("Hz").magnitude
    )


# ----------------------------------------------------------------------------- header matching


def test_one_letter_symbols_never_match_and_a_unit_ranks_the_candidates() -> None:
    """'f [Hz]': the attachment rate (label '... rate f') is not offered for the letter f; the
    quantities measured in Hz come first; a rate in s-1 ranks the rates first."""
    from comparo.base.catalog import load_catalog

    names = NameIndex.of(load_catalog())
    f = match_header("f [Hz]", 0, names)
    assert (
        not f.role and f.candidates[0] == "frequency_observed" and "attach_rate" not in f.candidates
    )
    k = match_header("k (s-1)", 0, names)
    assert not k.role and set(k.candidates[:2]) == {"attach_rate", "detach_rate"}
    assert "frequency_observed" not in k.candidates[:2]
    # words alone would offer a power for 'passive'; the unit keeps only what a stress measures
    stiff = match_header("Passive stiffness (kN m-2)", 0, names)
    assert stiff.candidates and all(names.kinds[k] == "stress" for k in stiff.candidates)
    temp = match_header("T (°C)", 0, names)
    assert not temp.role and "set role 'temperature'" in temp.problem


def test_own_header_synonyms_in_comparo_toml_and_in_the_map(tmp_path, capsys) -> None:
    rows = [
        ["Species", "Source", "f [Hz]", "k_on (s-1)", "T (°C)"],
        ["Apis mellifera", "s1", "230", "120", "30"],
    ]
    wide = write_csv(tmp_path / "wide.csv", rows)
    (tmp_path / "comparo.toml").write_text(
        '[header_synonyms]\nf = "frequency_observed"\nT = "temperature"\n', encoding="utf-8"
    )
    map_file = write_csv(
        tmp_path / "map.csv", [["header", "role", "key"], ["k_on", "synonym", "attach_rate"]]
    )
    res = import_wide(wide, tmp_path / "out", map_file=map_file)
    how = {c.header: (c.role, c.key, c.how) for c in res.columns}
    assert how["f [Hz]"] == ("value", "frequency_observed", "your synonym")
    assert how["k_on (s-1)"] == ("value", "attach_rate", "your synonym")
    assert how["T (°C)"][0] == "temperature"
    obs = observations(tmp_path / "out")
    assert set(obs["temperature_c"]) == {"30"}
    (tmp_path / "comparo.toml").write_text(
        '[header_synonyms]\nf = "frequency_observd"\n', encoding="utf-8"
    )
    assert run("import", wide, "-o", tmp_path / "out2", "--map", map_file) == 2
    err = capsys.readouterr().err
    assert "[synonym]" in err and "closest: frequency_observed" in err


def test_a_header_without_a_decision_never_prints_an_empty_message(tmp_path, capsys) -> None:
    rows = [["Species", "Source", "Body mass (g)", "Mystery"], ["Apis mellifera", "s1", "0.1", "3"]]
    wide = write_csv(tmp_path / "wide.csv", rows)
    map_file = write_csv(tmp_path / "map.csv", [["header", "role", "key"], ["Mystery", "", ""]])
    assert run("import", wide, "-o", tmp_path / "out", "--map", map_file) == 2
    err = capsys.readouterr().err
    line = next(ln for ln in err.splitlines() if "[header-unknown]" in ln)
    assert "header in column D: the map file gives it no role" in line
    assert ":  [" not in err


# ------------------------------------------------------------------------ columns in the wrong unit


def test_a_column_off_by_ten_to_the_third_is_one_message_with_the_likely_unit(
    tmp_path, capsys
) -> None:
    """Fibre radii of 5-25 µm typed under '(mm)': 5-25 mm is outside the plausible range
    (2-1500 µm), µm puts every value inside: one warning for the column naming µm."""
    rows = [["Species", "Source", "Fibre radius (mm)"]] + [
        [f"Genus species{i}", "s1", str(v)] for i, v in enumerate([5, 12, 14, 20, 25, 9])
    ]
    wide = write_csv(tmp_path / "wide.csv", rows)
    assert run("import", wide, "-o", tmp_path / "out") == 0
    err = capsys.readouterr().err
    assert "[out-of-range]" not in err
    line = next(ln for ln in err.splitlines() if "[column-unit]" in ln)
    assert "6 of 6 values" in line and "is the column's unit µm?" in line
    assert (observations(tmp_path / "out")["unit"] == "mm").all()  # imported as the header says


def test_a_few_odd_cells_stay_cell_warnings(tmp_path, capsys) -> None:
    """Two of eight values out of range: not the column's unit; each cell is warned of."""
    vals = [5, 12, 14, 20, 25, 9, 9000, 8000]
    rows = [["Species", "Source", "Fibre radius (µm)"]] + [
        [f"Genus species{i}", "s1", str(v)] for i, v in enumerate(vals)
    ]
    wide = write_csv(tmp_path / "wide.csv", rows)
    assert run("import", wide, "-o", tmp_path / "out") == 0
    err = capsys.readouterr().err
    assert err.count("[out-of-range]") == 2 and "[column-unit]" not in err


# ----------------------------------------------------------------------------- repeated messages


def test_a_repeated_message_is_printed_once_with_its_cells(tmp_path, capsys) -> None:
    rows = [["Species", "Source", "Body mass (g)", "Fibre radius (µm)"]]
    rows += [[f"Genus species{i}", "s9", "0.1", "12"] for i in range(8)]
    wide = write_csv(tmp_path / "wide.csv", rows)
    sources = tmp_path / "sources.csv"
    sources.write_text(
        "source_id,citation\ns1,Invented A. (2001) A test source\n", encoding="utf-8"
    )
    assert run("import", wide, "-o", tmp_path / "out", "--sources", sources) == 2
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if "[source-unknown]" in ln]
    assert (
        len(lines) == 1
        and "cells B2, B3, B4, B5, B6, B7, B8, B9" in lines[0]
        and "(8 cells)" in lines[0]
    )


def test_cell_warnings_beyond_five_in_a_column_are_counted(tmp_path, capsys) -> None:
    rows = [["Species", "Source", "Fibre radius (µm)"]]
    rows += [
        [f"Genus species{i}", "s1", str(v)]
        for i, v in enumerate(
            [
                12,
                14,
                9,
                11,
                13,
                15,
                10,
                12,
                14,
                16,
                11,
                13,
                12,
                14,
                9000,
                8000,
                7000,
                6000,
                5000,
                4000,
                3000,
                2000,
            ]
        )
    ]
    wide = write_csv(tmp_path / "wide.csv", rows)
    assert run("import", wide, "-o", tmp_path / "out") == 0
    err = capsys.readouterr().err
    assert err.count("[out-of-range]") == 6  # five printed, one summary line
    assert (
        "warning: ... and 3 more [out-of-range] in column 'Fibre radius (µm)' not listed one by one"
        in err
    )
