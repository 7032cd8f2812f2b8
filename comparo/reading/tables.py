"""Read a dataset folder: observations (CSV/TSV/XLSX), sources (CSV or BibTeX),
optional taxa.csv, tree.nwk and comparo.toml.

Reading never modifies a file and never guesses silently: every cell is kept as
the text the user typed (validation parses numbers later and says where it
could not), spreadsheet row numbers are kept (header = row 1), and anything
that makes a file unreadable becomes a :class:`~comparo.base.errors.Problem` naming
the file, line and rule.
"""

from __future__ import annotations

import csv
import io as _io
import logging
import re
import sys
import threading
import tomllib
import unicodedata
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any

from comparo.base.errors import InputError, Problem

OBSERVATION_NAMES = (
    "observations.csv",
    "observations.tsv",
    "observations.txt",
    "observations.xlsx",
)
SOURCE_NAMES = ("sources.csv", "sources.tsv", "sources.bib", "sources.xlsx")
TAXA_NAMES = ("taxa.csv", "taxa.tsv", "taxa.xlsx")
TREE_NAMES = ("tree.nwk", "tree.newick", "tree.tre")
TRACES_NAMES = ("traces.csv", "traces.tsv")
SETTINGS_NAME = "comparo.toml"

SETTINGS_KEYS = {
    "reference_temperature_c",
    "q10",
    "derive",
    "quantities",
    "ratios",
    "analysis",
    "comparison",
    "impute",
    "aggregate",
    "conflict_factor",
    "temperature_model",
    "activation_energy_kj_mol",
    "title",
    "seed",
    "header_synonyms",
    "temperature",
}

MAX_CELL = 10_000  # characters; longer cells are an error (pasted garbage)
MAX_COLUMNS = 16_384  # columns of any table (a spreadsheet's own limit, A to XFD)


def too_many_columns(file: str, n: int, row: int | None = 1) -> Problem | None:
    """The problem of a header with more than :data:`MAX_COLUMNS` columns (else None)."""
    if n <= MAX_COLUMNS:
        return None
    return _err(
        file,
        "too-many-columns",
        f"the header has {n:,} columns; comparo reads at most {MAX_COLUMNS:,} "
        "(a spreadsheet's own limit)",
        "a table with one column per value? put values in rows",
        row=row,
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


@dataclass
class RawDataset:
    """Everything read from a folder before validation."""

    folder: Path
    observations: RawTable | None = None
    sources: RawTable | None = None
    taxa: RawTable | None = None
    traces: RawTable | None = (
        None  # the index of trace files (traces.csv); the files are read by comparo.traces.files
    )
    tree: Any = None
    tree_text: str | None = None
    settings: dict[str, Any] = field(default_factory=dict)
    files: dict[str, Path] = field(default_factory=dict)
    problems: list[Problem] = field(default_factory=list)


def _err(
    file: str,
    rule: str,
    message: str,
    hint: str = "",
    row: int | None = None,
    column: str | None = None,
    value: str | None = None,
    severity: str = "error",
) -> Problem:
    return Problem(severity, file, row, column, value, rule, message, hint)


# --------------------------------------------------------------------------- text files


def exception_reason(exc: Exception) -> str:
    """What a library said went wrong, in its words but without its exception class name."""
    text = str(exc).strip().splitlines()[0][:200] if str(exc).strip() else ""
    return text or "the file is damaged or not of this format"


def decode_bytes(data: bytes, file: str) -> tuple[str | None, list[Problem]]:
    """Decode a text file: UTF-8 (with or without BOM), UTF-16 with BOM; other
    8-bit text is decoded as Windows-1252 with a warning. Binary data is an error."""
    probs: list[Problem] = []
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            return data.decode("utf-16"), probs
        except UnicodeDecodeError as exc:
            return None, [
                _err(
                    file,
                    "encoding",
                    f"file starts with a UTF-16 byte-order mark but is not valid UTF-16 ({exc.reason})",
                    "re-save the file as UTF-8 CSV",
                )
            ]
    if data.startswith(b"PK\x03\x04"):
        return None, [
            _err(
                file,
                "file-format",
                "this is a zip/XLSX workbook, not a text table",
                "name it .xlsx, or export the sheet as CSV (UTF-8)",
            )
        ]
    nul = data.find(b"\x00")
    if nul >= 0:
        endian = _utf16_without_bom(data)
        if endian:
            return None, [
                _err(
                    file,
                    "encoding",
                    f"file is UTF-16 ({endian}-endian) text without a byte-order mark",
                    "re-save the file as UTF-8 (or as UTF-16 with a byte-order mark)",
                )
            ]
        line = data[:nul].count(b"\n") + 1
        return None, [
            _err(
                file,
                "file-format",
                f"file contains NUL bytes (first on line {line}, byte {nul + 1}): not a text table",
                "export the table as CSV (UTF-8); a NUL byte is often a binary file or a broken copy",
                row=line,
            )
        ]
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    if data.endswith(b"\x1a"):  # Ctrl-Z, an old end-of-file marker
        data = data.rstrip(b"\x1a")
        probs.append(
            _err(
                file,
                "end-of-file-marker",
                "file ends with a Ctrl-Z (byte 0x1A) end-of-file marker; ignored",
                "nothing to do; re-saving the file removes it",
                severity="warning",
            )
        )
    try:
        return data.decode("utf-8"), probs
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        try:
            text = data.decode("cp1252")
        except UnicodeDecodeError:
            return None, [
                _err(
                    file,
                    "encoding",
                    f"file is not UTF-8 text (byte 0x{data[exc.start]:02X} on line {line})",
                    "re-save the file as UTF-8",
                    row=line,
                )
            ]
        probs.append(
            _err(
                file,
                "encoding",
                f"file is not UTF-8 (first non-UTF-8 byte 0x{data[exc.start]:02X} on line {line}); read as Windows-1252/Latin-1",
                "check accented names, and re-save as UTF-8 to silence this",
                row=line,
                severity="warning",
            )
        )
        return text, probs


def nfc(text: str) -> str:
    """*text* in Unicode normalisation form C (composed: 'é' as one code point).

    Every cell, column name, key and id is read in this form, so a name typed
    with a decomposed accent (e + combining acute, as some systems write it) is
    the same name as the composed one.
    """
    return text if text.isascii() else unicodedata.normalize("NFC", text)


# characters that show nothing (zero-width space, non-joiner, joiner, word joiner, soft hyphen,
# left-to-right and right-to-left marks, bidirectional embeddings and isolates, a byte-order
# mark inside text) and spaces other than the plain one (no-break, narrow no-break, thin,
# figure, ideographic ...): in a name they make a second name that looks the same
_INVISIBLE = re.compile(
    "[\u00ad\u061c\u180e\u200b-\u200f\u202a-\u202e\u2060-\u2064\u2066-\u2069\ufeff]"
)
_ODD_SPACE = re.compile("[\u00a0\u1680\u2000-\u200a\u202f\u205f\u3000]")
# the columns holding names, keys, units and ids (matched exactly), where such characters are read away
NAME_COLUMNS = frozenset(
    {
        "obs_id",
        "taxon",
        "quantity",
        "unit",
        "uncertainty_kind",
        "source_id",
        "basis",
        "inputs",
        "proxy_taxon",
        "preparation",
        "accepted_name",
        "tree_label",
        "trace_id",
        "kind",
        "time_unit",
        "x_unit",
        "y_unit",
        "thermoregulation",
    }
)


_LABEL_WITH_INVISIBLE = re.compile(r"[^(),:;\[\]]*" + _INVISIBLE.pattern + r"[^(),:;\[\]]*")


def visible(text: str) -> str:
    """*text* as it looks: characters that show nothing removed, any other space a plain
    space, and (where one of those was) runs of spaces made one and the ends trimmed.

    Names, keys, units and ids are read so (:data:`NAME_COLUMNS`), so that
    ``'Apis\u00a0mellifera'`` (a no-break space) and ``'Apis mellifera\u200b'`` (a
    zero-width space) are the taxon ``'Apis mellifera'``; each such cell is named in a
    warning (rule ``invisible-character``)."""
    if text.isascii():
        return text
    t = _ODD_SPACE.sub(" ", _INVISIBLE.sub("", text))
    return re.sub(" {2,}", " ", t).strip() if t != text else t


def _invisible_names(text: str) -> str:
    found = dict.fromkeys(c for c in text if _INVISIBLE.match(c) or _ODD_SPACE.match(c))
    return ", ".join(f"U+{ord(c):04X} {unicodedata.name(c, 'unnamed')}" for c in found)


def clean_names(file: str, frame, rows: list[int], other_rows: bool = True) -> list[Problem]:
    """Read the name columns of *frame* (in place) with :func:`visible`; one warning per
    distinct value changed, naming its first cell (and the other rows holding it, when
    *other_rows*), what it held and how it is read."""
    probs: list[Problem] = []
    for col in frame.columns:
        if str(col) not in NAME_COLUMNS:
            continue
        s = frame[col]
        fix = {u: visible(u) for u in s.unique() if isinstance(u, str) and not u.isascii()}
        fix = {k: v for k, v in fix.items() if k != v}
        if not fix:
            continue
        for old, new in fix.items():
            where = [rows[i] for i in map(int, (s == old).to_numpy().nonzero()[0])]
            more = (
                f" (rows {', '.join(map(str, where[:5]))}{' ...' if len(where) > 5 else ''})"
                if len(where) > 1 and other_rows
                else ""
            )
            probs.append(
                _err(
                    file,
                    "invisible-character",
                    f"{old!r} holds {_invisible_names(old)}, which shows as nothing "
                    f"or as a plain space; read as {new!r}{more}",
                    "retype the cell if the name was meant to differ; nothing to do otherwise",
                    row=where[0],
                    column=str(col),
                    value=old,
                    severity="warning",
                )
            )
        frame[col] = s.map(lambda v, fix=fix: fix.get(v, v))
    return probs


def _nfc_cells(frame, rows: list[int]) -> dict[str, dict[str, list[tuple[str, int]]]]:
    """Normalise every cell of *frame* (strings) to NFC in place; return what changed."""
    import pandas as pd

    changed: dict[str, dict[str, list[tuple[str, int]]]] = {}
    for col in frame.columns:
        s = frame[col]
        fix = {u: nfc(u) for u in pd.unique(s) if isinstance(u, str) and not u.isascii()}
        fix = {k: v for k, v in fix.items() if k != v}
        if not fix:
            continue
        for i in map(int, (s.isin(list(fix))).to_numpy().nonzero()[0]):
            changed.setdefault(fix[s.iat[i]], {}).setdefault(s.iat[i], []).append(
                (str(col), rows[i])
            )
        frame[col] = s.map(lambda v, fix=fix: fix.get(v, v))
    return changed


def _utf16_without_bom(data: bytes) -> str:
    """``'little'`` or ``'big'`` when *data* reads as UTF-16 text of mostly ASCII
    characters without a byte-order mark (every other byte NUL), else ``''``."""
    if len(data) < 4:
        return ""
    even, odd = data[0::2], data[1::2]
    for endian, zeros, chars, codec in (
        ("little", odd, even, "utf-16-le"),
        ("big", even, odd, "utf-16-be"),
    ):
        if zeros.count(0) >= 0.6 * len(zeros) and chars.count(0) <= 0.05 * len(chars):
            try:
                data[: len(data) // 2 * 2].decode(codec)
            except UnicodeDecodeError:
                continue
            return endian
    return ""


def _delimiter(header: str, path: Path) -> str:
    if path.suffix.lower() in (".tsv", ".tab"):
        return "\t"
    counts = {d: header.count(d) for d in (",", "\t", ";")}
    best = max(counts, key=counts.get)
    return best if counts[best] > 0 else ","


def read_text_table(path: Path, name: str | None = None) -> tuple[RawTable | None, list[Problem]]:
    """Read a CSV/TSV file into a :class:`RawTable` of strings."""
    import pandas as pd

    file = name or path.name
    try:
        data = path.read_bytes()
    except OSError as exc:
        return None, [_err(file, "file-read", f"cannot read file ({exc.strerror})")]
    text, probs = decode_bytes(data, file)
    if text is None:
        return None, probs
    text = text.replace("\r\n", "\n").replace("\r", "\n")
    lines = text.split("\n")
    first = next((i for i, ln in enumerate(lines) if ln.strip()), None)
    if first is None:
        return None, probs + [
            _err(file, "empty-file", "file is empty", "add a header row with the column names")
        ]
    header = lines[first]
    if header.count('"') % 2:
        return None, probs + [
            _err(
                file,
                "header-line-break",
                "the header row has an unclosed quote: a column name holds a line break inside quotes (or a stray '\"')",
                "give every column a one-line name without quotes",
                row=first + 1,
                value=header[:60],
            )
        ]
    delim = _delimiter(header, path)
    if delim == ";":
        decimal_comma = bool(re.search(r"\d,\d", text))
        hint = "save it comma-separated with '.' as the decimal mark (spreadsheet: CSV UTF-8, English locale)"
        msg = "file is semicolon-delimited" + (" with decimal commas" if decimal_comma else "")
        return None, probs + [_err(file, "delimiter", msg, hint, row=first + 1)]
    if delim == "\t" and path.suffix.lower() == ".csv" and "," not in header:
        delim = "\t"
    hdr = next(csv.reader([header], delimiter=delim))
    wide = too_many_columns(file, len(hdr), row=first + 1)
    if wide is not None:
        return None, probs + [wide]
    names = [nfc(h.strip().lstrip("\ufeff")) for h in hdr]
    seen: dict[str, int] = {}
    for i, h in enumerate(names):
        if not h:
            probs.append(
                _err(
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
        key = names[i].lower()
        if key in seen:
            probs.append(
                _err(
                    file,
                    "duplicate-column",
                    f"column name {names[i]!r} appears more than once (columns {seen[key] + 1} and {i + 1})",
                    "rename or delete one of them",
                    row=first + 1,
                    column=names[i],
                )
            )
        seen.setdefault(key, i)
    if any(p.rule == "duplicate-column" for p in probs):
        return None, probs
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
                _err(
                    file,
                    "field-count",
                    f"row has {m.group(2)} fields but the header has {len(names)}",
                    "a stray delimiter or an unquoted comma inside a cell",
                    row=line,
                )
            ]
        return None, probs + [_err(file, "csv-syntax", f"cannot parse the table ({exc})")]
    except (ValueError, csv.Error) as exc:
        return None, probs + [_err(file, "csv-syntax", f"cannot parse the table ({exc})")]
    rows = list(range(first + 2, first + 2 + len(frame)))
    return _finish(file, frame, rows, probs, _TextFacts.of(text))


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
        control = _CONTROL.search(text) is not None
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


def _finish(
    file: str, frame, rows: list[int], probs: list[Problem], facts: _TextFacts | None = None
) -> tuple[RawTable, list[Problem]]:
    import numpy as np

    facts = facts or _TextFacts()
    frame = frame.fillna("").astype(str)
    if (facts.padded or facts.non_ascii) and frame.size:  # non-ASCII text may hold Unicode blanks
        frame = _cellwise(frame, str.strip).astype(frame.dtypes.iloc[0])
    # blank rows (every cell empty) are layout, not data: drop them, keep row numbers
    keep = (frame != "").any(axis=1).to_numpy()
    if not keep.all():
        frame = frame.loc[keep].reset_index(drop=True)
        rows = [r for r, k in zip(rows, keep, strict=True) if k]
    respelled = _nfc_cells(frame, rows) if facts.non_ascii else {}
    if (
        facts.quoted
    ):  # the apostrophe comparo puts before a formula-like text (comparo.base.csvsafe)
        from comparo.base.csvsafe import restore_frame

        restore_frame(frame)
    if facts.control:
        probs += _control_characters(file, frame, rows)
    long = (
        _cellwise(frame, len).to_numpy(dtype=np.int64) > MAX_CELL
        if facts.long and frame.size
        else None
    )
    if long is not None and long.any():
        for ci, col in enumerate(frame.columns):
            for ri in frame.index[long[:, ci]]:
                probs.append(
                    _err(
                        file,
                        "cell-length",
                        f"cell has {len(frame.at[ri, col])} characters (limit {MAX_CELL})",
                        "shorten it; long notes belong in a separate file",
                        row=rows[ri],
                        column=col,
                        value=frame.at[ri, col][:40] + "...",
                    )
                )
                frame.at[ri, col] = frame.at[ri, col][:MAX_CELL]
    known = _known_columns()
    frame.columns = [
        c.lower() if c.lower() in known else c for c in (str(c).strip() for c in frame.columns)
    ]
    if facts.non_ascii:
        probs += clean_names(file, frame, rows)
    return RawTable(file, frame, rows, respelled), probs


def _cellwise(frame, fun):
    """*fun* applied to every cell of a frame of strings, over the whole array at once (a
    column at a time costs about a millisecond a column in pandas: 16 s for 16,384 columns)."""
    import numpy as np
    import pandas as pd

    out = np.frompyfunc(fun, 1, 1)(frame.to_numpy(dtype=object))
    return pd.DataFrame(out, index=frame.index, columns=frame.columns)


@lru_cache(maxsize=1)
def _known_columns() -> frozenset[str]:
    """Column names declared in schema/tables.toml (matched case-insensitively)."""
    from comparo.base.catalog import read_schema

    spec = read_schema("tables.toml")
    return frozenset(c for t in spec.values() if isinstance(t, dict) for c in t.get("columns", {}))


_CONTROL = re.compile(r"[\x01-\x08\x0b\x0c\x0e-\x1f\x7f]")


def _control_characters(file: str, frame, rows: list[int]) -> list[Problem]:
    """Invisible control characters in cells (a binary paste, a Ctrl-Z): errors at the cell."""
    probs = []
    for col in frame.columns:
        hit = frame[col].str.contains(_CONTROL, regex=True).to_numpy(dtype=bool)
        for i in map(int, hit.nonzero()[0]):
            v = frame[col].iat[i]
            c = _CONTROL.search(v).group(0)
            probs.append(
                _err(
                    file,
                    "control-character",
                    f"cell holds the invisible control character 0x{ord(c):02X}",
                    "delete it (retype the cell)",
                    row=rows[i],
                    column=str(col),
                    value=v.encode("unicode_escape").decode("ascii")[:60],
                )
            )
    return probs


# Workbook bounds, checked before openpyxl reads a sheet: a few-KB .xlsx can declare (or place
# one stray cell at) row 1,048,576 and column XFD, and its sheet XML can inflate to gigabytes.
MAX_SHEET_XML_BYTES = 512 * 2**20  # uncompressed XML of one sheet (or of the shared strings)
MAX_SHEET_CELLS = 10_000_000  # rows times columns a sheet's cells span


def _letters_index(letters: str) -> int:
    n = 0
    for ch in letters:
        n = 26 * n + ord(ch) - 64
    return n


def _sheet_span(book: Any, info: Any) -> tuple[int, int]:
    """Last row and last column (1-based) of the cells present in one sheet's XML, read
    streaming (expat, no tree kept); stops early once the span passes MAX_SHEET_CELLS."""
    from xml.parsers import expat

    span = {"row": 0, "col": 0, "last_row": 0, "last_col": 0}
    cell = re.compile(r"([A-Z]{1,3})(\d*)$")

    def start(name: str, attrs: dict[str, str]) -> None:
        tag = name.rsplit(":", 1)[-1]
        if tag == "row":
            r = attrs.get("r", "")
            span["row"] = int(r) if r.isdigit() else span["row"] + 1
            span["col"] = 0
            span["last_row"] = max(span["last_row"], span["row"])
        elif tag == "c":
            m = cell.match(attrs.get("r", ""))
            span["col"] = _letters_index(m.group(1)) if m else span["col"] + 1
            span["last_col"] = max(span["last_col"], span["col"])

    parser = expat.ParserCreate()
    parser.StartElementHandler = start
    with book.open(info) as fh:
        while chunk := fh.read(1 << 20):
            parser.Parse(chunk, False)
            if span["last_row"] * span["last_col"] > MAX_SHEET_CELLS:
                break
        else:
            parser.Parse(b"", True)
    return span["last_row"], span["last_col"]


def workbook_problems(path: Path) -> list[Problem]:
    """Size checks of an .xlsx before it is loaded: each sheet's (and the shared strings')
    uncompressed XML at most :data:`MAX_SHEET_XML_BYTES`, and the rows times columns its
    cells span at most :data:`MAX_SHEET_CELLS` (counted from the cells actually present,
    streaming, not from the declared dimension). A file that is not a zip is left to the
    reader's own message."""
    import zipfile

    file = path.name
    try:
        book = zipfile.ZipFile(path)
    except (zipfile.BadZipFile, OSError, ValueError):
        return []
    probs: list[Problem] = []
    with book:
        members = [
            i
            for i in book.infolist()
            if re.fullmatch(r"xl/(worksheets/[^/]+\.xml|sharedStrings\.xml)", i.filename)
        ]
        for info in members:
            if info.file_size > MAX_SHEET_XML_BYTES:
                probs.append(
                    _err(
                        file,
                        "xlsx-size",
                        f"{info.filename} inflates to {info.file_size / 2**20:,.1f} MB "
                        f"of XML; comparo reads at most {MAX_SHEET_XML_BYTES / 2**20:,.1f} MB per sheet",
                        "split the table over several files, or save it as CSV",
                    )
                )
        if probs:
            return probs
        for info in members:
            if not info.filename.startswith("xl/worksheets/"):
                continue
            try:
                last_row, last_col = _sheet_span(book, info)
            except Exception:  # a damaged sheet: the reader says what is wrong with it
                continue
            if last_row * last_col > MAX_SHEET_CELLS:
                probs.append(
                    _err(
                        file,
                        "xlsx-size",
                        f"a sheet ({info.filename}) has cells as far as row {last_row:,} "
                        f"and column {last_col:,}: {last_row * last_col:,} cells to read, more than "
                        f"comparo's limit of {MAX_SHEET_CELLS:,}",
                        "delete the stray cells (or formatting) beyond the table, or save it as CSV",
                    )
                )
    return probs


def read_excel_table(path: Path, sheet: str) -> tuple[RawTable | None, list[Problem]]:
    """Read the sheet named *sheet* (else the first sheet) of an XLSX workbook."""
    import pandas as pd

    file = path.name
    too_big = workbook_problems(path)
    if too_big:
        return None, too_big
    try:
        book = pd.ExcelFile(path, engine="openpyxl")
    except Exception as exc:  # openpyxl raises many types for a broken workbook
        return None, [
            _err(
                file,
                "xlsx-read",
                f"cannot open the workbook ({exception_reason(exc)})",
                "check that it is an .xlsx file (not .xls or CSV renamed)",
            )
        ]
    names = book.sheet_names
    chosen = sheet if sheet in names else (names[0] if names else None)
    if chosen is None:
        return None, [_err(file, "empty-file", "workbook has no sheets")]
    file = f"{path.name}[{chosen}]"
    try:
        frame = pd.read_excel(book, sheet_name=chosen, header=None, dtype=object)
    except Exception as exc:
        return None, [
            _err(
                file,
                "xlsx-read",
                "cannot read the sheet: a cell record is damaged or holds no finite "
                f"number ({exception_reason(exc)})",
                "open the workbook in a spreadsheet program and save it again, or save the sheet as CSV",
            )
        ]
    if frame.empty:
        return None, [
            _err(
                file,
                "empty-file",
                "sheet is empty",
                "put the table on the first sheet, header in row 1",
            )
        ]
    frame = frame.map(_excel_cell)
    nonblank = (frame != "").any(axis=1).to_numpy()
    first = int(nonblank.argmax())
    header = [nfc(str(h).strip()) for h in frame.iloc[first].tolist()]
    probs: list[Problem] = []
    seen: dict[str, int] = {}
    for i, h in enumerate(header):
        if not h:
            header[i] = f"unnamed_{i + 1}"
            if (frame.iloc[first + 1 :, i] != "").any():
                probs.append(
                    _err(
                        file,
                        "column-name",
                        f"column {i + 1} has no header (a merged header cell?)",
                        "give every column its own header cell",
                        row=first + 1,
                        column=f"#{i + 1}",
                        severity="warning",
                    )
                )
        key = header[i].lower()
        if key in seen:
            probs.append(
                _err(
                    file,
                    "duplicate-column",
                    f"column name {header[i]!r} appears more than once",
                    "rename or delete one of them",
                    row=first + 1,
                    column=header[i],
                )
            )
        seen.setdefault(key, i)
    if any(p.rule == "duplicate-column" for p in probs):
        return None, probs
    body = frame.iloc[first + 1 :].reset_index(drop=True)
    body.columns = header
    _percent_as_shown(book, chosen, body, first)
    keep = [not (h.startswith("unnamed_") and (body[h] == "").all()) for h in header]
    body = body.loc[:, keep]
    rows = list(range(first + 2, first + 2 + len(body)))
    table, probs = _finish(file, body, rows, probs)
    from openpyxl.utils import get_column_letter

    positions = [i for i, k in enumerate(keep) if k]
    table.letters = {
        str(c): get_column_letter(i + 1)
        for c, i in zip(table.frame.columns, positions, strict=True)
    }
    return table, probs


class Percent(float):
    """A number cell of a workbook shown as a percentage: the float is the number stored
    (0.5), which the sheet shows as 50%."""

    def shown(self) -> str:
        """The number the sheet shows before its % sign, as text (``'50'`` for 0.5)."""
        from decimal import Decimal

        return format((Decimal(repr(float(self))) * 100).normalize(), "f")


def is_percent_format(number_format: str | None) -> bool:
    """True when a cell's number format shows the value times 100 with a % sign (``0%``,
    ``0.0%``; ECMA-376 Part 1, 18.8.31); a % inside quotes or after a backslash is a literal
    and does not scale."""
    if not number_format:
        return False
    return "%" in re.sub(r'"[^"]*"|\\.', "", str(number_format))


def is_percent_unit(unit: str) -> bool:
    """True for a unit that is one hundredth of a plain number (``%``, ``percent``)."""
    from comparo.base import units

    try:
        return not units.unit_dimensions(unit) and abs(units.base_factor(unit) - 0.01) < 1e-12
    except Exception:  # a unit pint cannot read is reported by validation
        return False


def _percent_as_shown(book, sheet: str, body, first: int) -> None:
    """In place: cells of ``value`` and ``uncertainty`` formatted as a percentage, on rows
    whose ``unit`` is a percent, as the sheet shows them (stored 0.5, shown 50% -> '50')."""
    cols = {str(c).strip().lower(): i for i, c in enumerate(body.columns)}
    targets = [cols[c] for c in ("value", "uncertainty") if c in cols]
    if "unit" not in cols or not targets:
        return
    units_typed = body.iloc[:, cols["unit"]].astype(str).str.strip()
    percent = {u for u in units_typed.unique() if u and is_percent_unit(u)}
    want = set(map(int, units_typed.isin(percent).to_numpy().nonzero()[0]))
    if not want:
        return
    sheet_rows = book.book[sheet].iter_rows(min_row=first + 2, max_row=first + 1 + len(body))
    for k, row in enumerate(sheet_rows):
        if k not in want:
            continue
        for j in targets:
            cell = row[j] if j < len(row) else None
            v = getattr(cell, "value", None)
            if (
                isinstance(v, int | float)
                and not isinstance(v, bool)
                and is_percent_format(getattr(cell, "number_format", None))
            ):
                body.iat[k, j] = Percent(v).shown()


def _excel_cell(v: Any) -> str:
    import datetime as _dt
    import math

    if v is None:
        return ""
    if isinstance(v, float):
        if math.isnan(v):
            return ""
        return repr(v) if not v.is_integer() else str(int(v)) if abs(v) < 1e15 else repr(v)
    if isinstance(v, _dt.datetime | _dt.date):
        return (
            v.isoformat()[:10]
            if isinstance(v, _dt.datetime) and v.time() == _dt.time()
            else v.isoformat()
        )
    return str(v)


def read_table(path: Path, sheet: str) -> tuple[RawTable | None, list[Problem]]:
    """Read a table by its extension (.csv/.tsv/.txt text, .xlsx workbook)."""
    if path.suffix.lower() in (".xlsx", ".xlsm"):
        return read_excel_table(path, sheet)
    return read_text_table(path)


# --------------------------------------------------------------------------- sources


def read_bibtex(path: Path) -> tuple[RawTable | None, list[Problem]]:
    """Read ``sources.bib`` into a sources table (entry keys are source_ids)."""
    import bibtexparser
    import pandas as pd

    file = path.name
    data = path.read_bytes()
    text, probs = decode_bytes(data, file)
    if text is None:
        return None, probs
    if not text.strip():
        return None, probs + [_err(file, "empty-file", "BibTeX file is empty")]
    logging.getLogger("bibtexparser").setLevel(logging.CRITICAL)  # its problems become ours
    try:
        lib = bibtexparser.parse_string(text)
    except Exception as exc:
        return None, probs + [
            _err(file, "bibtex-syntax", f"cannot parse BibTeX ({exception_reason(exc)})")
        ]
    for block in lib.failed_blocks:
        lines = [ln for ln in str(getattr(block, "error", "") or "").splitlines() if ln.strip()]
        reason = lines[-1].strip()[:200] if lines else "syntax error"
        probs.append(
            _err(
                file,
                "bibtex-syntax",
                f"BibTeX entry cannot be read: {reason}",
                "check braces and commas of this entry",
                row=(block.start_line or 0) + 1,
                value=block.raw[:60],
            )
        )
    recs, rows = [], []
    for entry in lib.entries:
        f = {k.lower(): _strip_braces(fld.value) for k, fld in entry.fields_dict.items()}
        recs.append(
            {
                "source_id": entry.key,
                "citation": bibtex_citation(f),
                "year": f.get("year", ""),
                "doi": f.get("doi", ""),
                "url": f.get("url", ""),
                "notes": f.get("note", ""),
            }
        )
        rows.append((entry.start_line or 0) + 1)
    if not recs:
        return None, probs or [_err(file, "empty-file", "BibTeX file holds no entries")]
    frame = pd.DataFrame(
        recs, columns=["source_id", "citation", "year", "doi", "url", "notes"]
    ).astype(str)
    return RawTable(file, frame, rows, _nfc_cells(frame, rows)), probs


def _sentence(text: str) -> str:
    """*text* ending in exactly one full stop (or its own '?' or '!')."""
    t = text.strip().rstrip(".").rstrip()
    return "" if not t else t if t[-1] in "?!" else t + "."


def _authors(text: str) -> str:
    """BibTeX's 'A and B and C' as 'A, B and C'."""
    names = [n.strip() for n in re.split(r"\s+and\s+", text.strip()) if n.strip()]
    return (
        names[0]
        if len(names) == 1
        else ", ".join(names[:-1]) + " and " + names[-1]
        if names
        else ""
    )


def bibtex_citation(f: dict[str, str]) -> str:
    """A citation that reads like one, from the fields of a BibTeX entry (lower-case keys):
    ``Authors (year). Title. Journal volume(issue): pages.`` Each part ends in one full
    stop; missing parts are left out; page ranges get an en dash."""
    head = _authors(f.get("author", "") or f.get("editor", ""))
    year = f.get("year", "")
    if year:
        head = f"{head} ({year})" if head else f"({year})"
    venue = f.get("journal", "")
    if not venue and f.get("booktitle"):
        venue = "In " + f["booktitle"]
    volume, number = f.get("volume", ""), f.get("number", "") or f.get("issue", "")
    pages = re.sub(r"\s*-{1,3}\s*", "\u2013", f.get("pages", ""))
    where = venue
    if volume:
        where += f" {volume}" if where else f"Vol. {volume}"
    if number:
        where += f"({number})"
    if pages:
        where += f": {pages}" if where else f"pp. {pages}"
    publisher = f.get("publisher", "") if not f.get("journal") else ""
    parts = [
        _sentence(p)
        for p in (head, f.get("title", ""), where.strip(), publisher)
        if p and p.strip()
    ]
    return " ".join(p for p in parts if p)


def _strip_braces(v: Any) -> str:
    return re.sub(r"\s+", " ", str(v).replace("{", "").replace("}", "")).strip()


# --------------------------------------------------------------------------- tree, settings

_DEEP = 400  # nesting depth above which the Newick parser runs on a big stack
_parse_lock = threading.Lock()


def _nesting_depth(text: str) -> int:
    """Largest parenthesis nesting depth of *text* (quotes and comments ignored: an
    upper bound is all that is needed to size the parser's stack)."""
    import numpy as np

    b = np.frombuffer(text.encode("utf-8", "replace"), dtype=np.uint8)
    if b.size == 0:
        return 0
    step = (b == ord("(")).astype(np.int64) - (b == ord(")")).astype(np.int64)
    return int(np.cumsum(step).max(initial=0))


def parse_newick(text: str) -> Any:
    """Parse Newick *text* with dendropy into a TreeList; deep trees on a thread with a big stack.

    dendropy's Newick reader recurses once per nesting level, so a ladder
    (caterpillar) tree of depth 50,000 exceeds Python's default recursion limit.
    The parse then runs on its own thread with a stack and recursion limit sized
    to the nesting depth; the limits are restored afterwards.
    """
    import dendropy

    def parse() -> Any:
        return dendropy.TreeList.get(
            data=text,
            schema="newick",
            preserve_underscores=True,
            suppress_leaf_node_taxa=True,
            suppress_internal_node_taxa=True,
            rooting="force-rooted",
        )

    depth = _nesting_depth(text)
    if depth < _DEEP:
        return parse()
    out: dict[str, Any] = {}

    def work() -> None:
        try:
            out["trees"] = parse()
        except BaseException as exc:  # re-raised on the calling thread
            out["error"] = exc

    with _parse_lock:
        old_limit = sys.getrecursionlimit()
        old_stack = threading.stack_size()
        try:
            sys.setrecursionlimit(max(old_limit, 30 * depth + 10_000))
            threading.stack_size(int(min(2**31 - 1, max(64 * 2**20, 6_000 * depth))))
            worker = threading.Thread(target=work, name="comparo-newick")
            worker.start()
            worker.join()
        finally:
            threading.stack_size(old_stack)
            sys.setrecursionlimit(old_limit)
    if "error" in out:
        raise out["error"]
    return out["trees"]


class DeferredTree:
    """A tree read by :func:`comparo.reading.newick.parse`, built as a dendropy tree on first use.

    ``topology`` (pre-order lists) is there at once; any dendropy attribute
    (``seed_node``, ``leaf_nodes()``...) builds the dendropy tree from the same
    text with :func:`parse_newick` and answers from it, so code written for a
    dendropy tree keeps working while commands that never walk the tree skip
    dendropy altogether.
    """

    def __init__(self, text: str, topology: Any) -> None:
        self.text = text
        self.topology = topology
        self._tree = None

    @property
    def tree(self) -> Any:
        """The dendropy tree (built once)."""
        if self._tree is None:
            self._tree = parse_newick(self.text)[0]
        return self._tree

    def __getattr__(self, name: str) -> Any:
        if name.startswith("__") or name in ("text", "topology", "_tree"):
            raise AttributeError(name)
        return getattr(self.tree, name)


def read_newick(path: Path) -> tuple[Any, str | None, list[Problem]]:
    """Parse a Newick tree: plain Newick by :func:`comparo.reading.newick.parse` (a
    :class:`DeferredTree`), anything else by dendropy. Returns (tree, text, problems)."""
    file = path.name
    text, probs = decode_bytes(path.read_bytes(), file)
    if text is None:
        return None, None, probs
    if not text.strip():
        return None, None, probs + [_err(file, "empty-file", "tree file is empty")]
    if nfc(text) != text:
        text = nfc(text)
        probs.append(
            _err(
                file,
                "unicode-unified",
                "some tip labels are typed with decomposed accents; read in Unicode NFC (composed) so that they match the same names typed composed",
                "nothing to do unless two labels differed only in this way",
                severity="warning",
            )
        )
    if not text.isascii() and _INVISIBLE.search(text):  # tips are matched to taxa as they look
        labels = list(
            dict.fromkeys(m.group(0).strip() for m in _LABEL_WITH_INVISIBLE.finditer(text))
        )
        probs.append(
            _err(
                file,
                "invisible-character",
                f"tip label(s) {', '.join(map(repr, labels[:5]))}"
                f"{' ...' if len(labels) > 5 else ''} hold {_invisible_names(''.join(labels))}, which shows "
                "as nothing; matched to taxa as they look",
                "nothing to do unless a label was meant to differ",
                value=labels[0],
                severity="warning",
            )
        )
    if text.count("(") != text.count(")"):
        return (
            None,
            text,
            probs
            + [
                _err(
                    file,
                    "newick-syntax",
                    f"unbalanced parentheses ({text.count('(')} '(' vs {text.count(')')} ')')",
                    "check the Newick string",
                )
            ],
        )
    from comparo.reading.newick import parse

    topology = parse(text)
    if topology is not None:
        return (
            DeferredTree(text if text.rstrip().endswith(";") else text.rstrip() + ";", topology),
            text,
            probs,
        )
    try:
        trees = parse_newick(text if text.rstrip().endswith(";") else text.rstrip() + ";")
        if len(trees) != 1:
            return (
                None,
                text,
                probs
                + [
                    _err(
                        file,
                        "newick-syntax",
                        f"the file holds {len(trees)} trees; exactly one is needed",
                    )
                ],
            )
        tree = trees[0]
    except RecursionError:
        return (
            None,
            text,
            probs + [_err(file, "newick-depth", "tree is too deeply nested to parse")],
        )
    except Exception as exc:
        msg = str(exc).splitlines()[0][:200] if str(exc) else type(exc).__name__
        return (
            None,
            text,
            probs
            + [
                _err(
                    file,
                    "newick-syntax",
                    f"cannot parse the Newick tree: {msg}",
                    "check the Newick string",
                )
            ],
        )
    return tree, text, probs


MAX_SETTINGS_DEPTH = 16  # tables and arrays inside one another; comparo's own settings use 3


def nesting(value: Any) -> int:
    """How deeply tables (dicts) and arrays (lists) of parsed TOML sit inside one another
    (0 for a plain value); measured without recursion."""
    depth, stack = 0, [(value, 0)]
    while stack:
        v, d = stack.pop()
        if isinstance(v, dict | list):
            depth = max(depth, d + 1)
            stack.extend((x, d + 1) for x in (v.values() if isinstance(v, dict) else v))
    return depth


def too_deep(file: str) -> Problem:
    """The problem of a TOML file nested beyond :data:`MAX_SETTINGS_DEPTH`."""
    return _err(
        file,
        "toml-depth",
        f"tables or arrays are nested more than {MAX_SETTINGS_DEPTH} levels deep",
        "settings are a few levels deep at most; see docs/data-format.md",
    )


def read_settings(path: Path) -> tuple[dict[str, Any], list[Problem]]:
    """Parse comparo.toml; unknown top-level keys are warnings."""
    file = path.name
    text, probs = decode_bytes(path.read_bytes(), file)
    if text is None:
        return {}, probs
    try:
        settings = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"line (\d+)", str(exc))
        return {}, probs + [
            _err(
                file,
                "toml-syntax",
                f"cannot parse settings: {exc}",
                "see docs/data-format.md for the settings format",
                row=int(m.group(1)) if m else None,
            )
        ]
    except RecursionError:
        return {}, probs + [too_deep(file)]
    if nesting(settings) > MAX_SETTINGS_DEPTH:
        return {}, probs + [too_deep(file)]
    settings = _nfc_value(settings)
    for key in settings:
        if key not in SETTINGS_KEYS:
            probs.append(
                _err(
                    file,
                    "settings-key",
                    f"unknown setting {key!r} (ignored)",
                    f"known settings: {', '.join(sorted(SETTINGS_KEYS))}",
                    column=key,
                    severity="warning",
                )
            )
    t = settings.get("reference_temperature_c")
    number = isinstance(t, int | float) and not isinstance(t, bool)
    if t is not None and t != "operating" and (not number or not -5 <= t <= 60):
        probs.append(
            _err(
                file,
                "settings-value",
                "reference_temperature_c must be a number of degrees Celsius "
                'between -5 and 60, or "operating" (each taxon\'s operating_temperature_c in taxa.csv)',
                column="reference_temperature_c",
                value=str(t),
            )
        )
    return settings, probs


def _nfc_value(v: Any) -> Any:
    """Keys and strings of parsed settings in NFC (numbers and booleans as they are)."""
    if isinstance(v, dict):
        return {nfc(k): _nfc_value(x) for k, x in v.items()}
    if isinstance(v, list):
        return [_nfc_value(x) for x in v]
    return nfc(v) if isinstance(v, str) else v


# --------------------------------------------------------------------------- folder


def unified_spellings(tables: list[RawTable]) -> list[Problem]:
    """Warnings for names typed in two Unicode forms (composed and decomposed) that
    reading made one: each names the places of every spelling."""
    wanted: set[str] = set()
    for t in tables:
        wanted.update(t.respelled)
    if not wanted:
        return []
    where: dict[str, dict[str, list[str]]] = {}
    for t in tables:
        moved = {(c, r) for sp in t.respelled.values() for places in sp.values() for c, r in places}
        for col in t.frame.columns:
            s = t.frame[col]
            for i in map(int, s.isin(list(wanted)).to_numpy().nonzero()[0]):
                v, row = s.iat[i], t.rows[i]
                typed = "composed (NFC)" if (str(col), row) not in moved else "decomposed"
                where.setdefault(v, {}).setdefault(typed, []).append(f"{t.file} row {row}")
    probs = []
    for v, forms in where.items():
        typed_as = {sp for t in tables for sp in t.respelled.get(v, {})}
        if len(forms) < 2 and len(typed_as) < 2:  # one spelling only: normalised, nothing unified
            continue
        first = next(t for t in tables if v in t.respelled)
        col, row = next(iter(next(iter(first.respelled[v].values()))))
        places = "; ".join(
            f"{form}: {', '.join(p[:3])}{' ...' if len(p) > 3 else ''}" for form, p in forms.items()
        )
        probs.append(
            _err(
                first.file,
                "unicode-unified",
                f"{v!r} is typed in two Unicode forms ({places}); read as one name",
                "nothing to do if they are the same name; retype one if they were meant to differ",
                row=row,
                column=col,
                value=v,
                severity="warning",
            )
        )
    return probs


def not_a_file(path: str | Path) -> str | None:
    """What *path* is when it exists but is not a regular file ("a folder", "a named pipe
    (FIFO)", "a device or socket"), else None. Checked with ``stat`` before any ``open``:
    opening a FIFO without a writer blocks for ever, and a device such as /dev/zero never
    ends."""
    import stat as _stat

    try:
        mode = Path(path).stat().st_mode
    except (OSError, ValueError):
        return None
    if _stat.S_ISREG(mode):
        return None
    return (
        "a folder"
        if _stat.S_ISDIR(mode)
        else "a named pipe (FIFO)"
        if _stat.S_ISFIFO(mode)
        else "a device or socket"
    )


def _first(folder: Path, names: tuple[str, ...], problems: list[Problem]) -> Path | None:
    """The first of *names* in *folder* that is a regular file. A name that exists but
    is a folder, a FIFO or device, or a symbolic link that loops or leads nowhere is a
    problem (an error), never read and never silently skipped."""
    for n in names:
        p = folder / n
        try:
            p.stat()
        except OSError as exc:
            if p.is_symlink():
                why = (
                    "a symbolic link that loops"
                    if exc.errno == 40
                    else "a symbolic link to nothing"
                )
                problems.append(
                    _err(n, "not-a-file", f"{n} is {why}", "replace the link with the file itself")
                )
            elif exc.errno not in (2, 20):  # ENOENT, ENOTDIR: simply absent
                problems.append(_err(n, "file-read", f"cannot read {n} ({exc.strerror})"))
            continue
        what = not_a_file(p)
        if what is None:
            return p
        problems.append(
            _err(
                n,
                "not-a-file",
                f"{n} is {what}, not a file",
                f"put the table in a regular file named {n}",
            )
        )
    return None


WORKBOOK_SHEETS = ("observations", "sources", "taxa")


def read_workbook(path: Path) -> RawDataset:
    """A whole dataset in one workbook (a filled entry template): sheets ``observations``
    and ``sources``, and ``taxa`` when it holds rows. Messages name the sheet and cell."""
    import openpyxl

    raw = RawDataset(folder=path)
    raw.problems += workbook_problems(path)
    if raw.problems:
        return raw
    try:
        book = openpyxl.load_workbook(path, read_only=True)
        names = list(book.sheetnames)
        book.close()
    except Exception as exc:  # openpyxl raises many types for a broken workbook
        raw.problems.append(
            _err(
                path.name,
                "xlsx-read",
                f"cannot open the workbook ({exception_reason(exc)})",
                "check that it is an .xlsx file (not .xls, or CSV renamed)",
            )
        )
        return raw
    for sheet in WORKBOOK_SHEETS:
        if sheet not in names:
            if sheet != "taxa":
                raw.problems.append(
                    _err(
                        path.name,
                        "missing-sheet",
                        f"the workbook has no sheet {sheet!r} (its sheets: {', '.join(names)})",
                        "a dataset workbook holds the sheets observations and sources (comparo template writes one)",
                    )
                )
            continue
        table, p = read_excel_table(path, sheet)
        if (
            sheet == "taxa"
            and (table is None or len(table) == 0)
            and not any(x.severity == "error" and x.rule != "empty-file" for x in p)
        ):
            continue  # an empty optional sheet: no taxa table
        raw.problems += p
        setattr(raw, sheet, table)
        raw.files[sheet] = path
    _read_tree_and_settings(raw, path.parent)
    raw.problems += unified_spellings(
        [t for t in (raw.observations, raw.sources, raw.taxa) if t is not None]
    )
    return raw


def _read_tree_and_settings(raw: RawDataset, folder: Path) -> None:
    """The tree (tree.nwk ...) and comparo.toml of a dataset: in its folder, or beside its workbook."""
    tree = _first(folder, TREE_NAMES, raw.problems)
    if tree is not None:
        raw.files["tree"] = tree
        raw.tree, raw.tree_text, p = read_newick(tree)
        raw.problems += p
    settings = _first(folder, (SETTINGS_NAME,), raw.problems)
    if settings is not None:
        raw.files["settings"] = settings
        raw.settings, p = read_settings(settings)
        raw.problems += p


def is_workbook(path: str | Path) -> bool:
    """Whether *path* names a dataset workbook (an existing .xlsx/.xlsm file), not a folder."""
    path = Path(path)
    return path.is_file() and path.suffix.lower() in (".xlsx", ".xlsm")


def companion_file(dataset: str | Path, names: tuple[str, ...]) -> Path | None:
    """The first of *names* that belongs to *dataset*: inside a dataset folder, or beside a
    dataset workbook (``tree.nwk`` and ``comparo.toml`` next to ``entry.xlsx``); None if absent."""
    dataset = Path(dataset)
    folder = dataset.parent if is_workbook(dataset) else dataset
    return next((folder / n for n in names if (folder / n).is_file()), None)


def input_files(dataset: str | Path) -> list[Path]:
    """The files a dataset is read from: every regular, non-hidden file at the top of a
    dataset folder; for a workbook, the workbook and the tree and comparo.toml beside it."""
    dataset = Path(dataset)
    if is_workbook(dataset):
        extra = [companion_file(dataset, TREE_NAMES), companion_file(dataset, (SETTINGS_NAME,))]
        return [dataset] + [p for p in extra if p is not None]
    return [p for p in sorted(dataset.iterdir()) if p.is_file() and not p.name.startswith(".")]


def cell_coordinates(raw: RawDataset, problems: list[Problem]) -> list[Problem]:
    """Problems at a cell of a workbook sheet, with the cell's coordinates ('cell C7: ...')
    put before the message."""
    from dataclasses import replace

    tables = {
        t.file: t.letters
        for t in (raw.observations, raw.sources, raw.taxa)
        if t is not None and t.letters
    }
    if not tables:
        return problems
    out = []
    for p in problems:
        letter = tables.get(p.file, {}).get(p.column or "")
        if letter and p.row is not None and not p.message.startswith("cell "):
            p = replace(p, message=f"cell {letter}{p.row}: {p.message}")
        out.append(p)
    return out


def read_folder(folder: str | Path) -> RawDataset:
    """Read every file of a dataset folder (no validation of the cells yet).

    Raises
    ------
    InputError
        If the folder does not exist or is not a folder.
    """
    from comparo.base.arguments import check_path

    folder = check_path(folder, "folder")
    if not folder.exists():
        raise InputError(
            [
                _err(
                    str(folder),
                    "missing-folder",
                    "dataset folder does not exist",
                    "give the path of a folder holding observations.csv and sources.csv",
                )
            ]
        )
    if folder.is_file() and folder.suffix.lower() in (".xlsx", ".xlsm"):
        return read_workbook(folder)
    if not folder.is_dir():
        raise InputError(
            [
                _err(
                    str(folder),
                    "not-a-folder",
                    "expected a dataset folder (or a dataset workbook .xlsx), got a file",
                    "give the folder that holds observations.csv and sources.csv",
                )
            ]
        )
    raw = RawDataset(folder=folder)
    found = len(raw.problems)
    obs = _first(folder, OBSERVATION_NAMES, raw.problems)
    if obs is None:
        if len(raw.problems) == found:
            raw.problems.append(
                _err(
                    str(folder),
                    "missing-file",
                    "no observations table",
                    f"add one of {', '.join(OBSERVATION_NAMES)}",
                )
            )
    else:
        raw.files["observations"] = obs
        raw.observations, p = read_table(obs, "observations")
        raw.problems += p
    found = len(raw.problems)
    src = _first(folder, SOURCE_NAMES, raw.problems)
    if src is None:
        if len(raw.problems) == found:
            raw.problems.append(
                _err(
                    str(folder),
                    "missing-file",
                    "no sources table",
                    "add sources.csv (source_id, citation, ...) or sources.bib",
                )
            )
    else:
        raw.files["sources"] = src
        raw.sources, p = read_bibtex(src) if src.suffix == ".bib" else read_table(src, "sources")
        raw.problems += p
    tax = _first(folder, TAXA_NAMES, raw.problems)
    if tax is not None:
        raw.files["taxa"] = tax
        raw.taxa, p = read_table(tax, "taxa")
        raw.problems += p
    traces = _first(folder, TRACES_NAMES, raw.problems)
    if traces is not None:
        raw.files["traces"] = traces
        raw.traces, p = read_table(traces, "traces")
        raw.problems += p
    _read_tree_and_settings(raw, folder)
    raw.problems += unified_spellings(
        [t for t in (raw.observations, raw.sources, raw.taxa, raw.traces) if t is not None]
    )
    return raw
