"""CSV text that is safe to open in a spreadsheet.

A text cell that begins with ``=``, ``+``, ``-``, ``@``, a tab or a carriage
return is run as a formula by common spreadsheet programs (CSV/formula
injection, OWASP). Every CSV comparo writes goes through :func:`to_csv`, which
prefixes such text cells with an apostrophe. Numbers, and text that is a
plain number such as ``-3.5``, are left untouched.
"""

from __future__ import annotations

import re

import pandas as pd

_DANGER = ("=", "+", "-", "@", "\t", "\r")
_NUMBER = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$")


def neutralise(value: object) -> object:
    """One cell: an apostrophe before a text that a spreadsheet would run as a formula."""
    if isinstance(value, str) and value.startswith(_DANGER) and not _NUMBER.match(value.strip()):
        return "'" + value
    return value


def neutralise_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of *frame* with every dangerous text cell neutralised (numbers untouched)."""
    out = frame.copy()
    for col in out.columns:
        if not (pd.api.types.is_numeric_dtype(out[col]) or pd.api.types.is_bool_dtype(out[col])):
            out[col] = out[col].map(neutralise)
    out.columns = [neutralise(c) for c in out.columns]
    return out


def to_csv(frame: pd.DataFrame, **kwargs) -> str:
    """``frame.to_csv`` (no index, full float precision by default) after :func:`neutralise_frame`."""
    kwargs.setdefault("index", False)
    kwargs.setdefault("lineterminator", "\n")
    return neutralise_frame(frame).to_csv(**kwargs)
