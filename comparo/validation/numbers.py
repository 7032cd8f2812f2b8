"""Numbers as validation reads them: cells parsed as doubles in whole columns, the range
of a double and the working range comparo computes in, and what to say about a cell that is
not a number."""

from __future__ import annotations

import math
import re

import numpy as np
import pandas as pd

MISSING_WORDS = {"na", "n/a", "nan", "n.d.", "nd", "none", "null", "-", "?", "—", "–"}

INT_EXACT = (
    2**53 - 1
)  # largest whole number a float64 holds exactly (IEEE 754); fits a 64-bit integer
DOUBLE_MAX = float(np.finfo(float).max)  # about 1.8e308 (IEEE 754 binary64)
# Magnitudes comparo computes with, in canonical units: their squares and products of two stay
# inside a double (1e-300 to 1e300), so no weight, variance or derived time over- or underflows.
WORKING_RANGE = (1e-150, 1e150)
_MANTISSA = re.compile(r"^\s*[-+]?(\d*\.?\d*)(?:[eE][-+]?\d+)?\s*$")


# --------------------------------------------------------------------------- helpers


def map_distinct(s: pd.Series, fn) -> pd.Series:
    """``s.map(fn)`` with *fn* called once per distinct value (a 100,000-row column
    holds a few dozen quantity keys)."""
    return s.map({k: fn(k) for k in pd.unique(s)}) if len(s) else s.map(fn)


def parse_numbers(s: pd.Series) -> pd.Series:
    """Cells as float (NaN where empty or not a finite number, and where a non-zero
    number such as ``1e-400`` is too small for a double and would read as 0)."""
    num = pd.to_numeric(s.where(s != ""), errors="coerce").astype(float)
    num = num.where(np.isfinite(num))
    zero = (num == 0).to_numpy()
    if zero.any():
        under = s[zero].str.match(r"^[^eE]*[1-9]").to_numpy(dtype=bool)
        num.iloc[np.flatnonzero(zero)[under]] = np.nan
    return num


def beyond_double(text: str) -> str:
    """``'over'`` when *text* is a finite-looking number too large for a double
    (``1e400``), ``'under'`` when it is non-zero but too small (``1e-400`` reads as 0),
    else ``''``."""
    m = _MANTISSA.match(text or "")
    if not m or not re.search(r"\d", m.group(1)):
        return ""
    try:
        v = float(text)
    except ValueError:
        return ""
    if math.isinf(v):
        return "over"
    if v == 0 and re.search(r"[1-9]", m.group(1)):
        return "under"
    return ""


def number_message(value: str) -> tuple[str, str]:
    """Message and hint for a cell that is not a usable number."""
    side = beyond_double(value)
    if side == "over":
        return (
            f"beyond the range of a double (largest about {DOUBLE_MAX:.3g})",
            "a pasted or mistyped exponent? give the number in a unit that keeps it below 1e150",
        )
    if side == "under":
        return (
            "below the smallest number a double holds (about 5e-324): it would read as 0",
            "a mistyped exponent? give the number in a unit that keeps it above 1e-150",
        )
    return "not a number", number_hint(value)


def number_hint(value: str) -> str:
    v = value.strip()
    if re.fullmatch(r"[-+]?\d+,\d+", v):
        return f"a decimal comma? write {v.replace(',', '.')}"
    if re.fullmatch(r"[-+]?\d{1,3}(\.\d{3})+,\d+", v):
        plain = v.replace(".", "").replace(",", ".")
        return f"a decimal comma with '.' between thousands? write {plain}"
    if re.fullmatch(r"[-+]?\d{1,3}(,\d{3})+(\.\d+)?", v):
        return f"a ',' between thousands? write {v.replace(',', '')}"
    if re.fullmatch(r"[-+]?0[xX][0-9a-fA-F]+", v):
        return f"a hexadecimal number is not read: write it in decimal ({int(v, 16)})"
    if v[:1] in "<>≤≥~":
        return (
            "a censored or approximate value cannot be used as a number: give the number and put "
            "the qualifier in notes"
        )
    if v.lower() in MISSING_WORDS:
        return (
            "no value: delete the row (an empty measurement is not an observation) or give the "
            "number"
        )
    if v.lower().lstrip("+-") in {"inf", "infinity"}:
        return "give a finite number"
    if re.search(r"\d\s*[a-zA-Zµ%]+$", v):
        return "put the unit in the unit column, the number alone in this one"
    if "±" in v or "+/-" in v:
        return "put the spread in the uncertainty column"
    return "enter a plain number such as 12.5 or 1.2e-3"
