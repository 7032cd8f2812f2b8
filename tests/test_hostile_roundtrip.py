"""Text that looks like a formula, through every CSV comparo writes and back.

The rule (comparo/base/csvsafe.py, after OWASP's "CSV Injection" page): a spreadsheet runs a
cell that begins with ``=`` or ``@`` (or a tab or carriage return), and one beginning with
``+`` or ``-`` when what follows is a formula (a function call, a DDE link ``|``,
arithmetic, a cell reference). Such cells are written with one apostrophe before them;
everything else is written as it is. Checked here over every column of every CSV output
(import, table, derive, audit -o, export datapackage and dwc, fit csv, the report's tables):

* no cell of any output can run as a formula (a predicate written here, independent of
  comparo's own);
* text that cannot run (``-`` as a dimensionless unit, ``+flight``, ``- resting``) is
  written exactly as it is, never with an apostrophe;
* reading any output back and writing it again gives the same bytes (the guard is undone
  exactly), and comparo reads what it wrote back to the values it started from.
The texts are our own; the list of formula starts is OWASP's (common practice).
"""

from __future__ import annotations

import csv
import io
from pathlib import Path

import pandas as pd
import pytest
from hostile_tools import changed_outside, snapshot
from support import OBS_HEADER, run_main

from comparo.base.csvsafe import restore_frame, to_csv

PLAIN = ["-", "+flight", "- resting", "-ve control", "'quoted", "+ 5 min", "-3.5"]
FORMULA = [
    "=1+1",
    "@SUM(A1)",
    "-2+3",
    "+cmd|' /C calc'!A0",
    '=HYPERLINK("http://example.org","x")',
    "'=x",
    "-A1",
    "\u0020=1+1",
]
TAXA = ["Apis mellifera", "Bombus terrestris", "Xylocopa violacea", "Vespa crabro"]


def live(cell: str) -> bool:
    """Would a spreadsheet run this CSV cell? (OWASP's starts, +/- followed by a formula
    character or a cell reference; written here apart from comparo's code on purpose.)"""
    t = cell.lstrip(" ")
    if t[:1] in ("=", "@", "\t", "\r"):
        return True
    if t[:1] in ("+", "-"):
        rest = t[1:]
        return any(ch in rest for ch in "()|!=@[{+-*/^&<>") or bool(
            __import__("re").match(r"\s*\$?[A-Za-z]{1,3}\$?\d", rest)
        )
    return False


def texts(i: int) -> str:
    every = PLAIN + FORMULA
    return every[i % len(every)]


@pytest.fixture(scope="module")
def rt(tmp_path_factory):
    """A dataset whose free-text cells (muscle, notes, locator, entered_by, citations,
    a grouping column) hold every hostile text, and a dimensionless unit written '-'."""
    root = tmp_path_factory.mktemp("rt")
    ds = root / "DS"
    ds.mkdir()
    header = OBS_HEADER.split(",") + ["muscle", "notes", "entered_by"]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    k = 0
    for i, taxon in enumerate(TAXA):
        for q, v, unit in (
            ("body_mass", 10 ** (i + 1), "mg"),
            ("frequency_observed", 200 / (i + 1), "Hz"),
            ("myofibril_volume_fraction", 0.4 + i / 20, "-"),
        ):
            k += 1
            w.writerow(
                [
                    f"o{k}",
                    taxon,
                    q,
                    v,
                    unit,
                    "",
                    "",
                    "",
                    "s1",
                    texts(k),
                    "reported",
                    "",
                    "",
                    25 if q == "frequency_observed" else "",
                    texts(k + 1),
                    texts(k + 2),
                    texts(k + 3),
                ]
            )
    (ds / "observations.csv").write_text(buf.getvalue(), encoding="utf-8")
    src = pd.DataFrame(
        {"source_id": ["s1"], "citation": [FORMULA[4]], "year": ["2001"], "notes": ["- resting"]}
    )
    (ds / "sources.csv").write_text(to_csv(src), encoding="utf-8")
    taxa = pd.DataFrame({"taxon": TAXA, "clade": [texts(i) for i in range(4)]})
    (ds / "taxa.csv").write_text(to_csv(taxa), encoding="utf-8")
    out = root / "out"
    runs = {
        "table.csv": ["table", ds, "-o", out / "table.csv"],
        "derive.csv": ["derive", ds, "-o", out / "derive.csv"],
        "audit": ["audit", ds, "-o", out / "audit", "--format", "json"],
        "dp": ["export", ds, "--to", "datapackage", "-o", out / "dp"],
        "dwc": ["export", ds, "--to", "dwc", "-o", out / "dwc"],
        "report": ["report", ds, "-o", out / "report", "--quiet"],
    }
    before, everything = snapshot(ds), snapshot(root)
    for name, argv in runs.items():
        proc = run_main(*map(str, argv))
        assert proc.returncode == 0, (name, proc.stderr)
    proc = run_main(
        "fit", str(ds), "--x", "body_mass", "--y", "frequency_observed", "--format", "csv"
    )
    assert proc.returncode == 0, proc.stderr
    (out / "fit.csv").write_text(proc.stdout, encoding="utf-8")
    assert snapshot(ds) == before
    assert changed_outside(everything, snapshot(root), ("out",)) == []
    return ds, out


def csv_outputs(out: Path) -> list[Path]:
    return sorted(p for p in out.rglob("*.csv"))


def test_every_output_was_written(rt):
    _, out = rt
    names = {p.relative_to(out).as_posix() for p in csv_outputs(out)}
    assert {
        "table.csv",
        "derive.csv",
        "fit.csv",
        "audit/lineage.csv",
        "audit/coverage.csv",
        "dp/observations.csv",
        "dp/sources.csv",
        "dp/taxa.csv",
        "dp/per_taxon.csv",
        "dwc/measurementorfact.csv",
    } <= names


def test_no_cell_of_any_output_runs_as_a_formula(rt):
    _, out = rt
    for f in csv_outputs(out):
        for r, row in enumerate(csv.reader(io.StringIO(f.read_text(encoding="utf-8")))):
            bad = [c for c in row if c and live(c)]
            assert not bad, (f.name, r, bad)


def test_plain_text_is_written_as_it_is(rt):
    """'-', '+flight', '- resting' ... never get an apostrophe; each still appears verbatim."""
    _, out = rt
    cells = {
        f.relative_to(out).as_posix(): {
            c for row in csv.reader(io.StringIO(f.read_text(encoding="utf-8"))) for c in row
        }
        for f in csv_outputs(out)
    }
    for f, seen in cells.items():
        assert not {"'" + p for p in PLAIN if not p.startswith("'")} & seen, f
    obs = cells["dp/observations.csv"]
    assert {p for p in PLAIN} <= obs and "-" in obs
    assert {"+flight", "- resting", "-"} <= cells["table.csv"]  # the clade column


@pytest.mark.parametrize(
    "name",
    [
        "table.csv",
        "derive.csv",
        "fit.csv",
        "audit/lineage.csv",
        "audit/coverage.csv",
        "audit/sources.csv",
        "audit/excluded.csv",
        "dp/observations.csv",
        "dp/sources.csv",
        "dp/taxa.csv",
        "dp/per_taxon.csv",
        "dwc/measurementorfact.csv",
    ],
)
def test_reading_an_output_back_and_writing_it_again_gives_the_same_bytes(rt, name):
    _, out = rt
    text = (out / name).read_text(encoding="utf-8")
    frame = restore_frame(pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False))
    assert to_csv(frame) == text


def test_every_csv_output_reads_back_to_the_same_bytes(rt):
    """The same over every CSV found in the outputs, the report's tables included."""
    _, out = rt
    found = csv_outputs(out)
    assert any(f.parent.name == "tables" for f in found)
    for f in found:
        text = f.read_text(encoding="utf-8")
        if text.strip():
            frame = restore_frame(pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False))
            assert to_csv(frame) == text, f


def test_export_reads_back_as_the_dataset_says(rt):
    """comparo -> datapackage -> comparo: every column of the observations, sources and taxa
    tables read back by comparo's reader equals the dataset's own reading."""
    from comparo.reading.tables import read_text_table

    ds, out = rt
    for table in ("observations.csv", "sources.csv", "taxa.csv"):
        mine, _ = read_text_table(ds / table)
        back, _ = read_text_table(out / "dp" / table)
        cols = [c for c in mine.frame.columns if c in back.frame.columns]
        assert len(cols) >= 2
        for c in cols:  # numbers as numbers (export writes canonical floats), text exactly
            a, b = mine.frame[c], back.frame[c]
            na, nb = pd.to_numeric(a, errors="coerce"), pd.to_numeric(b, errors="coerce")
            if na.notna().sum() == (a != "").sum() and na.notna().any():
                assert list(na.fillna(-1e300)) == list(nb.fillna(-1e300)), (table, c)
            else:
                assert list(a) == list(b), (table, c)
    back, _ = read_text_table(out / "dp" / "observations.csv")
    assert set(FORMULA[:5]) <= set(back.frame.stack())


def test_the_table_reads_back_through_fit(rt):
    """comparo table -> CSV -> comparo fit: the grouping column and the names come back exact."""
    from comparo.cli.commands.fit import read_table
    from comparo.curation.aggregation import per_taxon
    from comparo.validation.dataset import load

    ds, out = rt
    mine = per_taxon(load(ds))
    back = read_table(str(out / "table.csv"), say=False)
    assert list(back["clade"]) == list(mine["clade"])
    assert sorted(back["clade"]) == sorted(texts(i) for i in range(4))
    assert list(back["taxon"]) == list(mine["taxon"])


def test_import_keeps_a_dash_unit_and_formula_like_text(tmp_path):
    """A dimensionless unit written '-' and text cells that look like formulas come out of
    import as typed, and the imported folder passes check."""
    wide = tmp_path / "w.csv"
    frame = pd.DataFrame(
        {
            "Species": TAXA[:3],
            "Myofibril volume fraction (-)": ["0.5", "0.4", "0.45"],
            "Muscle": ["+flight", "=1+1", "- resting"],
            "Source": ["s1", "s1", "s1"],
        }
    )
    wide.write_text(frame.to_csv(index=False), encoding="utf-8")
    before = snapshot(tmp_path)
    proc = run_main("import", str(wide), "-o", str(tmp_path / "I"))
    assert proc.returncode == 0, proc.stderr
    assert changed_outside(before, snapshot(tmp_path), ("I",)) == []
    text = (tmp_path / "I" / "observations.csv").read_text(encoding="utf-8")
    assert ",-," in text and ",+flight," in text and "'=1+1" in text and "'- resting" not in text
    proc = run_main("check", str(tmp_path / "I"))
    assert proc.returncode == 0, proc.stderr
    from comparo.validation.dataset import load

    obs = load(tmp_path / "I").observations
    assert list(obs["muscle"]) == ["+flight", "=1+1", "- resting"]
    assert set(obs["unit"]) == {"-"}
