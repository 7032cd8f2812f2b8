"""A table as typed (:class:`RawTable`): every cell a string, spreadsheet row numbers
kept; the reader of CSV/TSV text tables of a dataset."""

from __future__ import annotations

import csv
import io as _io
import re
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any

from comparo.base.errors import Problem, problem
from comparo.reading.text import (
    CONTROL,
    MAX_CELL,
    cellwise,
    clean_names,
    control_characters,
    decode_bytes,
    duplicate_headers,
    long_cell,
    nfc,
    nfc_cells,
    semicolon_problem,
    sniff_delimiter,
    too_many_columns,
)


@dataclass
class RawTable:
    """A table as typed: every cell a string (empty string for blank), the row
    number a spreadsheet shows for each row, and the file it came from."""

    file: str
    frame: Any  # pandas.DataFrame of str
    rows: list[int]
    # cells not typed in Unicode NFC: NFC text -> {text as typed: [(column, row), ...]}
    respelled: dict[str, dict[str, list[tuple[str, int]]]] = field(default_factory=dict)
    # workbook sheets: column name -> spreadsheet column letters (for cell coordinates, 'C7')
    letters: dict[str, str] = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.frame)


def read_text_table(path: Path, name: str | None = None) -> tuple[RawTable | None, list[Problem]]:
    """Read a CSV/TSV file into a :class:`RawTable` of strings."""
    import pandas as pd

    file = name or path.name
    try:
        data = path.read_bytes()
    except OSError as exc:
        return None, [problem(file, "file-read", f"cannot read file ({exc.strerror})")]
    text, probs = decode_bytes(data, file)
    if text is None:
        return None, probs
    text = text.replace("\r\n", "\n").replace("\r", "\n")
    lines = text.split("\n")
    first = next((i for i, ln in enumerate(lines) if ln.strip()), None)
    if first is None:
        return None, probs + [
            problem(file, "empty-file", "file is empty", "add a header row with the column names")
        ]
    header = lines[first]
    if header.count('"') % 2:
        return None, probs + [
            problem(
                file,
                "header-line-break",
                "the header row has an unclosed quote: a column name holds a line break inside "
                "quotes (or a stray '\"')",
                "give every column a one-line name without quotes",
                row=first + 1,
                value=header[:60],
            )
        ]
    delim = sniff_delimiter(lines[first:], path.suffix)
    if delim == ";":
        hint = (
            "save it comma-separated with '.' as the decimal mark "
            "(spreadsheet: CSV UTF-8, English locale)"
        )
        return None, probs + [semicolon_problem(file, text, hint, row=first + 1)]
    hdr = next(csv.reader([header], delimiter=delim))
    wide = too_many_columns(file, len(hdr), row=first + 1)
    if wide is not None:
        return None, probs + [wide]
    names = [nfc(h.strip().lstrip("\ufeff")) for h in hdr]
    for i, h in enumerate(names):
        if not h:
            probs.append(
                problem(
                    file,
                    "column-name",
                    f"column {i + 1} has no header",
                    "name the column or delete it",
                    row=first + 1,
                    column=f"#{i + 1}",
                    severity="warning",
                )
            )
            names[i] = f"unnamed_{i + 1}"
    twice = duplicate_headers(file, names, first + 1)
    if twice:
        return None, probs + twice
    try:
        frame = pd.read_csv(
            _io.StringIO("\n".join(lines[first + 1 :])),
            sep=delim,
            header=None,
            names=names,
            dtype=str,
            keep_default_na=False,
            na_filter=False,
            skip_blank_lines=False,
            engine="c",
            quoting=csv.QUOTE_MINIMAL,
            index_col=False,
        )
    except pd.errors.ParserError as exc:
        m = re.search(r"line (\d+), saw (\d+)", str(exc))
        if m:
            line = int(m.group(1)) + first + 1
            return None, probs + [
                problem(
                    file,
                    "field-count",
                    f"row has {m.group(2)} fields but the header has {len(names)}",
                    "a stray delimiter or an unquoted comma inside a cell",
                    row=line,
                )
            ]
        return None, probs + [problem(file, "csv-syntax", f"cannot parse the table ({exc})")]
    except (ValueError, csv.Error) as exc:
        return None, probs + [problem(file, "csv-syntax", f"cannot parse the table ({exc})")]
    rows = list(range(first + 2, first + 2 + len(frame)))
    return finish_table(file, frame, rows, probs, _TextFacts.of(text))


_CELL_APOSTROPHE = re.compile("(?:^|[,;\t\n])\"?'")  # a cell that begins with an apostrophe


@dataclass(frozen=True)
class _TextFacts:
    """What a whole file's text rules out for every cell, so the per-cell passes can be skipped
    (a trace file of plain ASCII numbers needs none of them)."""

    padded: bool = True  # some cell may have leading or trailing blanks
    non_ascii: bool = True  # some cell may need NFC normalisation
    control: bool = True  # some cell may hold a control character
    long: bool = True  # some cell may exceed MAX_CELL characters
    quoted: bool = True  # some cell may begin with the apostrophe of comparo.base.csvsafe

    @classmethod
    def of(cls, text: str) -> _TextFacts:
        control = CONTROL.search(text) is not None
        return cls(
            padded=" " in text
            or "\t" in text
            or '"' in text
            or control,  # a quoted cell may hold a line break
            non_ascii=not text.isascii(),
            control=control,
            long=len(text) > MAX_CELL
            and ('"' in text or max(map(len, text.split("\n"))) > MAX_CELL),
            quoted="'" in text and _CELL_APOSTROPHE.search(text) is not None,
        )


def finish_table(
    file: str, frame, rows: list[int], probs: list[Problem], facts: _TextFacts | None = None
) -> tuple[RawTable, list[Problem]]:
    import numpy as np

    facts = facts or _TextFacts()
    frame = frame.fillna("").astype(str)
    if (facts.padded or facts.non_ascii) and frame.size:  # non-ASCII text may hold Unicode blanks
        frame = cellwise(frame, str.strip).astype(frame.dtypes.iloc[0])
    # blank rows (every cell empty) are layout, not data: drop them, keep row numbers
    keep = (frame != "").any(axis=1).to_numpy()
    if not keep.all():
        frame = frame.loc[keep].reset_index(drop=True)
        rows = [r for r, k in zip(rows, keep, strict=True) if k]
    respelled = nfc_cells(frame, rows) if facts.non_ascii else {}
    if (
        facts.quoted
    ):  # the apostrophe comparo puts before a formula-like text (comparo.base.csvsafe)
        from comparo.base.csvsafe import restore_frame

        restore_frame(frame)
    if facts.control:
        probs += control_characters(file, frame, rows)
    long = (
        cellwise(frame, len).to_numpy(dtype=np.int64) > MAX_CELL
        if facts.long and frame.size
        else None
    )
    if long is not None and long.any():
        for ci, col in enumerate(frame.columns):
            for ri in frame.index[long[:, ci]]:
                probs.append(long_cell(file, rows[ri], col, frame.at[ri, col]))
                frame.at[ri, col] = frame.at[ri, col][:MAX_CELL]
    known = _known_columns()
    frame.columns = [
        c.lower() if c.lower() in known else c for c in (str(c).strip() for c in frame.columns)
    ]
    if facts.non_ascii:
        probs += clean_names(file, frame, rows)
    return RawTable(file, frame, rows, respelled), probs


@lru_cache(maxsize=1)
def _known_columns() -> frozenset[str]:
    """Column names declared in schema/tables.toml (matched case-insensitively)."""
    from comparo.base.catalog import read_schema

    spec = read_schema("tables.toml")
    return frozenset(c for t in spec.values() if isinstance(t, dict) for c in t.get("columns", {}))
