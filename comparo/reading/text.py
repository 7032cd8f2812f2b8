"""Text as comparo reads it: bytes decoded (UTF-8, UTF-16 with a byte-order mark,
Windows-1252 with a warning), Unicode NFC, invisible characters read away from names,
the field delimiter of a table, and the checks of single cells (length, control
characters) that every table reader shares."""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Callable

from comparo.base.errors import Problem, problem

MAX_CELL = 10_000  # characters; longer cells are an error (pasted garbage)
MAX_COLUMNS = 16_384  # columns of any table (a spreadsheet's own limit, A to XFD)


def too_many_columns(file: str, n: int, row: int | None = 1) -> Problem | None:
    """The problem of a header with more than :data:`MAX_COLUMNS` columns (else None)."""
    if n <= MAX_COLUMNS:
        return None
    return problem(
        file,
        "too-many-columns",
        f"the header has {n:,} columns; comparo reads at most {MAX_COLUMNS:,} "
        "(a spreadsheet's own limit)",
        "a table with one column per value? put values in rows",
        row=row,
    )


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
                problem(
                    file,
                    "encoding",
                    "file starts with a UTF-16 byte-order mark but is not valid UTF-16 "
                    f"({exc.reason})",
                    "re-save the file as UTF-8 CSV",
                )
            ]
    if data.startswith(b"PK\x03\x04"):
        return None, [
            problem(
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
                problem(
                    file,
                    "encoding",
                    f"file is UTF-16 ({endian}-endian) text without a byte-order mark",
                    "re-save the file as UTF-8 (or as UTF-16 with a byte-order mark)",
                )
            ]
        line = data[:nul].count(b"\n") + 1
        return None, [
            problem(
                file,
                "file-format",
                f"file contains NUL bytes (first on line {line}, byte {nul + 1}): not a text table",
                "export the table as CSV (UTF-8); a NUL byte is often a binary file or a broken "
                "copy",
                row=line,
            )
        ]
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    if data.endswith(b"\x1a"):  # Ctrl-Z, an old end-of-file marker
        data = data.rstrip(b"\x1a")
        probs.append(
            problem(
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
                problem(
                    file,
                    "encoding",
                    f"file is not UTF-8 text (byte 0x{data[exc.start]:02X} on line {line})",
                    "re-save the file as UTF-8",
                    row=line,
                )
            ]
        probs.append(
            problem(
                file,
                "encoding",
                f"file is not UTF-8 (first non-UTF-8 byte 0x{data[exc.start]:02X} on line "
                f"{line}); read as Windows-1252/Latin-1",
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
# the columns holding names, keys, units and ids (matched exactly), where such characters are read
# away
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


def invisible_in(text: str) -> bool:
    """Whether *text* holds a character that shows nothing (a zero-width space, a mark)."""
    return _INVISIBLE.search(text) is not None


def invisible_labels(text: str) -> list[str]:
    """The Newick labels of *text* that hold a character showing nothing, in order, once each."""
    return list(dict.fromkeys(m.group(0).strip() for m in _LABEL_WITH_INVISIBLE.finditer(text)))


def invisible_names(text: str) -> str:
    """The invisible characters and odd spaces in *text*: ``'U+200B ZERO WIDTH SPACE, ...'``."""
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
                problem(
                    file,
                    "invisible-character",
                    f"{old!r} holds {invisible_names(old)}, which shows as nothing "
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


def nfc_cells(frame, rows: list[int]) -> dict[str, dict[str, list[tuple[str, int]]]]:
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


DELIMITERS = (",", "\t", ";")


def sniff_delimiter(lines: list[str], suffix: str) -> str:
    """The field delimiter of a text table: a tab for ``.tsv``/``.tab``; else, of comma, tab
    and semicolon, the one found most often on the first non-blank line that holds any
    of them (a title line above the header may hold none); a comma when none is found.
    Every reader of text tables (dataset files, a curator's wide sheet) uses this."""
    if suffix.lower() in (".tsv", ".tab"):
        return "\t"
    for line in lines[:50]:
        counts = {d: line.count(d) for d in DELIMITERS}
        if any(counts.values()):
            return max(counts, key=counts.get)
    return ","


def semicolon_problem(file: str, text: str, hint: str, row: int | None = 1) -> Problem:
    """The problem of a semicolon-delimited table (a spreadsheet export in a decimal-comma
    locale), the same message on every path; *hint* says what to do on this path."""
    decimal_comma = re.search(r"\d,\d", text) is not None
    return problem(
        file,
        "delimiter",
        "the table is semicolon-delimited"
        + (
            " with decimal commas (a spreadsheet export in a decimal-comma locale)"
            if decimal_comma
            else ""
        ),
        hint,
        row=row,
    )


def duplicate_headers(
    file: str, names: list[str], row: int, where: Callable[[int], str] = lambda i: str(i + 1)
) -> list[Problem]:
    """One ``duplicate-column`` error for each column name typed a second time (compared
    case-insensitively; blank names skipped); *where* names a column by its 0-based index
    (a number for text tables, letters for sheets)."""
    seen: dict[str, int] = {}
    probs = []
    for i, name in enumerate(names):
        key = name.casefold()
        if not key:
            continue
        if key in seen:
            probs.append(
                problem(
                    file,
                    "duplicate-column",
                    f"column name {name!r} appears more than once "
                    f"(columns {where(seen[key])} and {where(i)})",
                    "rename or delete one of them",
                    row=row,
                    column=name,
                )
            )
        seen.setdefault(key, i)
    return probs


def cellwise(frame, fun):
    """*fun* applied to every cell of a frame of strings, over the whole array at once (a
    column at a time costs about a millisecond a column in pandas: 16 s for 16,384 columns)."""
    import numpy as np
    import pandas as pd

    out = np.frompyfunc(fun, 1, 1)(frame.to_numpy(dtype=object))
    return pd.DataFrame(out, index=frame.index, columns=frame.columns)


CONTROL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")


def control_cell(file: str, row: int, column: str | None, value: str, where: str = "") -> Problem:
    """The error of a cell holding an invisible control character (a binary paste, a
    Ctrl-Z); *where* (``'C7'``) is put before the message when the cell has coordinates."""
    c = CONTROL.search(value).group(0)
    return problem(
        file,
        "control-character",
        f"{'cell ' + where + ': ' if where else ''}"
        f"cell holds the invisible control character 0x{ord(c):02X}",
        "delete it (retype the cell)",
        row=row,
        column=column,
        value=value.encode("unicode_escape").decode("ascii")[:60],
    )


def long_cell(file: str, row: int, column: str | None, value: str, where: str = "") -> Problem:
    """The error of a cell longer than :data:`MAX_CELL` characters (the cell is then read
    cut to that length)."""
    return problem(
        file,
        "cell-length",
        f"{'cell ' + where + ': ' if where else ''}"
        f"cell has {len(value)} characters (limit {MAX_CELL})",
        "shorten it; long notes belong in a separate file",
        row=row,
        column=column,
        value=value[:40] + "...",
    )


def control_characters(file: str, frame, rows: list[int]) -> list[Problem]:
    """Invisible control characters in the cells of a frame of strings: errors at the cell."""
    probs = []
    for col in frame.columns:
        hit = frame[col].str.contains(CONTROL, regex=True).to_numpy(dtype=bool)
        for i in map(int, hit.nonzero()[0]):
            probs.append(control_cell(file, rows[i], str(col), frame[col].iat[i]))
    return probs
