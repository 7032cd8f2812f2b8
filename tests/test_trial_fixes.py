"""Defects a new user met on an own compilation of insects, birds and bats (invented values,
typed for these tests): each test states the independent route its expectation comes from."""

from __future__ import annotations

import csv
import shlex
from pathlib import Path

import pint

from comparo.cli import main

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
    src = write_csv(tmp_path / "sources.csv", [["source_id", "citation"], ["s1", "Invented (2001)"]])
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
