"""CSV text that spreadsheets will not run as formulas, and that comparo reads back exactly.

Which cells a spreadsheet runs
------------------------------
Opening a CSV file, common spreadsheet programs read each cell as if it had been typed
into the sheet: a cell that begins with ``=`` is a formula, ``@`` starts a function
(a legacy prefix still honoured), and a cell that begins with ``+`` or ``-`` is parsed
as a formula when the rest parses as one; some programs also drop a leading tab or
carriage return before parsing (OWASP, "CSV Injection", owasp.org/www-community/
attacks/CSV_Injection). What can *run* (call a function, open a DDE link ``cmd|...!A0``,
follow an external reference, compute arithmetic, read another cell) needs one of
these, so a text cell is guarded when, leading spaces and apostrophes aside, it

* begins with ``=`` or ``@``, or with a tab, carriage return or line feed; or
* begins with ``+`` or ``-``, is not a plain number, and what follows holds a formula
  character (``( ) | ! = @ [ { + - * / ^ & < >``) or begins with a cell reference
  (``-A1``, ``+$B$2``).

So ``-`` (a dimensionless unit), ``+flight``, ``- resting``, ``-ve control`` and
``-3.5`` are written as they are: none of them can run anything. (A spreadsheet may
still show a bare word after a sign, such as ``+flight``, as a ``#NAME?`` error; the
file itself says ``+flight``, which is what every CSV reader and comparo read.)

How a cell is guarded, and read back
------------------------------------
A guarded cell gets one apostrophe in front (``'=HYPERLINK(...)``), which spreadsheets
show as a text marker rather than data. :func:`restore` removes exactly that apostrophe,
so every value comparo writes comes back unchanged when comparo (or a reader applying
:func:`restore`) reads the file: a text that itself begins with apostrophes before a
formula (``'=x``) gets one more on writing and loses one on reading. Numbers, and text
that is a plain number, are never touched.
"""

from __future__ import annotations

import re

import pandas as pd

_NUMBER = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$")
_FORMULA_CHARS = frozenset("()|!=@[{+-*/^&<>")
_CELL_REFERENCE = re.compile(r"^\s*\$?[A-Za-z]{1,3}\$?\d")


def runs_as_formula(text: str) -> bool:
    """True when a spreadsheet would parse *text* (a cell as typed) as a live formula
    (the rule of the module docstring; leading spaces ignored)."""
    t = text.lstrip(" ")
    if not t:
        return False
    first = t[0]
    if first in "=@\t\r\n":
        return True
    if first not in "+-" or _NUMBER.match(t.strip()):
        return False
    rest = t[1:]
    return any(c in _FORMULA_CHARS for c in rest) or _CELL_REFERENCE.match(rest) is not None


def _guarded(text: str) -> bool:
    return runs_as_formula(text.lstrip("' "))


def neutralise(value: object) -> object:
    """One cell: an apostrophe before a text that a spreadsheet would run as a formula
    (and before a text whose leading apostrophes hide one, so :func:`restore` is exact)."""
    if isinstance(value, str) and _guarded(value):
        return "'" + value
    return value


def restore(value: object) -> object:
    """The inverse of :func:`neutralise`: a text cell read from a CSV that comparo wrote
    loses the one apostrophe that guarded it; every other cell is returned as it is."""
    if isinstance(value, str) and value.startswith("'") and _guarded(value):
        return value[1:]
    return value


def neutralise_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of *frame* with every dangerous text cell neutralised (numbers untouched), for
    writing: without the table's ``attrs`` (metadata a CSV does not hold)."""
    out = frame.copy()
    out.attrs = {}  # each column read below would deep-copy the table's metadata otherwise
    for col in out.columns:
        if not (pd.api.types.is_numeric_dtype(out[col]) or pd.api.types.is_bool_dtype(out[col])):
            out[col] = out[col].map(neutralise)
    out.columns = [neutralise(c) for c in out.columns]
    return out


def restore_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """*frame* (text cells, as read from a CSV) with every guarded cell and column name
    restored (:func:`restore`), in place; returned for chaining."""
    for col in frame.columns:
        s = frame[col]
        if not (pd.api.types.is_numeric_dtype(s) or pd.api.types.is_bool_dtype(s)):
            try:
                marked = s.str.startswith("'", na=False).astype(bool)
            except (AttributeError, TypeError):  # no text in the column
                marked = s.map(lambda v: isinstance(v, str) and v.startswith("'"))
            if marked.any():
                frame.loc[marked, col] = s[marked].map(restore)
    frame.columns = [restore(c) for c in frame.columns]
    return frame


def to_csv(frame: pd.DataFrame, **kwargs) -> str:
    """``frame.to_csv`` (no index, full float precision by default) after
    :func:`neutralise_frame`."""
    kwargs.setdefault("index", False)
    kwargs.setdefault("lineterminator", "\n")
    return neutralise_frame(frame).to_csv(**kwargs)
