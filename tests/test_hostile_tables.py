"""Hostile text tables: more columns than any spreadsheet holds, and a rule broken in every
row. The first is refused before any work (it once hung), the second prints a handful of
lines, not one per row (it once printed 100,000); inputs stay byte-identical."""

from __future__ import annotations

import difflib
import time

import pytest
from hostile_checks import refused, snapshot
from support import run_main, write_dataset


def test_a_wide_table_with_100000_columns_is_refused_at_once(tmp_path):
    n = 100_000
    header = ["Species", "Body mass (g)", "Source"] + [f"extra{i}" for i in range(n)]
    row = ["Apis mellifera", "0.1", "S1"] + ["1"] * n
    (tmp_path / "wide.csv").write_text(
        ",".join(header) + "\n" + ",".join(row) + "\n", encoding="utf-8"
    )
    t0 = time.perf_counter()
    refused(
        tmp_path,
        ["import", "{tmp}/wide.csv", "-o", "{tmp}/out"],
        "100,003 columns",
        "at most 16,384",
        "too-many-columns",
    )
    assert time.perf_counter() - t0 < 20


def test_a_dataset_table_with_100000_columns_is_refused_at_once(tmp_path):
    ds = write_dataset(tmp_path / "DS")
    text = (ds / "observations.csv").read_text(encoding="utf-8").splitlines()
    extra = 100_000
    text = [text[0] + "".join(f",x{i}" for i in range(extra))] + [
        ln + ",a" * extra for ln in text[1:]
    ]
    (ds / "observations.csv").write_text("\n".join(text) + "\n", encoding="utf-8")
    t0 = time.perf_counter()
    for command in (["check", "{tmp}/DS"], ["table", "{tmp}/DS"]):
        refused(tmp_path, command, "observations.csv", "100,014 columns", "too-many-columns")
    assert time.perf_counter() - t0 < 30


def test_columns_at_the_limit_are_read_and_one_more_is_not(tmp_path, monkeypatch):
    """The limit itself is read, one column more is refused (the limit is lowered to 300 here to
    keep the test short; 16,384 columns read in a few seconds)."""
    import comparo.reading.tables as cio
    import comparo.reading.text as ctext

    monkeypatch.setattr(ctext, "MAX_COLUMNS", 300)
    for n, ok in ((300, True), (301, False)):
        header = ["obs_id"] + [f"c{i}" for i in range(n - 1)]
        (tmp_path / "t.csv").write_text(",".join(header) + "\n" + ",".join([" 1 "] * n) + "\n")
        table, probs = cio.read_text_table(tmp_path / "t.csv")
        refusals = [p for p in probs if p.rule == "too-many-columns"]
        if ok:
            assert table is not None and table.frame.shape == (1, n) and not refusals
            assert set(table.frame.iloc[0]) == {"1"}  # cells stripped, all at once
        else:
            assert table is None and len(refusals) == 1 and "301 columns" in refusals[0].message


@pytest.mark.parametrize(
    "name",
    [
        "body mas",
        "fibre radius",
        "wing beat frequencyy",
        "extra12",
        "sarcomere lenght",
        "attachment rate",
        "muscle",
        "x",
        "",
    ],
)
def test_closest_names_match_plain_difflib(name):
    """The header suggestions skip names by difflib's cheap upper bounds (real_quick_ratio,
    quick_ratio); the answer equals the plain computation with difflib.SequenceMatcher.ratio
    on every catalogue name (the reference, written here)."""
    from comparo.base.catalog import load_catalog
    from comparo.reading.headers import NameIndex

    index = NameIndex.of(load_catalog())
    scores: dict[str, float] = {}
    for n, keys in index.names.items():
        s = difflib.SequenceMatcher(None, name, n).ratio() + (
            0.2 if {w for w in name.split() if len(w) > 1} & set(n.split()) else 0.0
        )
        for k in keys:
            scores[k] = max(scores.get(k, 0.0), s)
    expected = [k for k in sorted(scores, key=lambda k: (-scores[k], k)) if scores[k] >= 0.45][:3]
    assert index.closest(name) == expected


def test_a_warning_in_every_row_prints_a_few_lines(tmp_path):
    """3,000 rows without a temperature and with a non-binomial name: two warnings per row, once
    6,000 lines; now five per rule and column plus one line counting the rest."""
    n = 3000
    lines = ["Species,Wingbeat frequency (Hz),Source"] + [
        f"Apis sp{i},{200 + i % 50},S1" for i in range(n)
    ]
    (tmp_path / "wide.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    before = snapshot(tmp_path)
    proc = run_main("import", str(tmp_path / "wide.csv"), "-o", str(tmp_path / "out"))
    assert proc.returncode == 0, proc.stderr[-2000:]
    err = proc.stderr.splitlines()
    assert len(err) < 20, err
    # the same message at every cell of a column: one line naming the cells and their count
    missing = [ln for ln in err if "[temperature-missing]" in ln]
    assert len(missing) == 1 and f"({n} cells)" in missing[0] and "cells B2, B3," in missing[0], (
        missing
    )
    # a message that differs from row to row: five lines, then one line counting the rest
    assert (
        f"warning: ... and {n - 5} more [taxon-binomial] in column 'Species' not listed one by one"
        in err
    )
    assert sum("[taxon-binomial]" in ln and "row" in ln for ln in err) == 5
    after = snapshot(tmp_path)
    assert {k: v for k, v in after.items() if not k.startswith("out")} == before


def test_many_errors_are_summarised_per_rule(tmp_path):
    """A dataset with the same error in 2,000 rows: exit 2, a few lines per rule, the count."""
    from support import VALID_ROWS

    rows = [
        f"x{i},Apis mellifera,body_mass,abc{i},mg,,,,s1,Table 1,reported,,," for i in range(2000)
    ] + VALID_ROWS
    write_dataset(tmp_path / "DS", rows)
    proc = run_main("table", str(tmp_path / "DS"))
    assert proc.returncode == 2
    lines = proc.stderr.splitlines()
    assert len(lines) < 30, lines
    assert any("... and 1995 more" in ln for ln in lines), lines


def test_one_error_repeated_word_for_word_is_one_line_naming_its_rows(tmp_path):
    """The same cell text failing the same rule in 2,000 rows: one line with the row range."""
    from support import VALID_ROWS

    rows = [
        f"x{i},Apis mellifera,body_mass,abc,mg,,,,s1,Table 1,reported,,," for i in range(2000)
    ] + VALID_ROWS
    write_dataset(tmp_path / "DS", rows)
    proc = run_main("table", str(tmp_path / "DS"))
    assert proc.returncode == 2
    lines = [ln for ln in proc.stderr.splitlines() if "[value-number]" in ln]
    assert len(lines) == 1 and "rows 2-2001" in lines[0] and "(2000 rows)" in lines[0], lines
