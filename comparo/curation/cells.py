"""The cells of a wide table as numbers: decimal marks, thousands separators, percentages
and ``12 ± 3`` spreads, with what to say about a cell that is not a number."""

from __future__ import annotations

import math
import re
from typing import Any

from comparo.reading.workbook import is_percent_unit

_PLAIN = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$")
_THOUSANDS_SPACE = re.compile(r"^[-+]?\d{1,3}([ \u00a0\u202f\u2009]\d{3})+([.,]\d+)?$")


# --------------------------------------------------------------------------- numbers


def percent_scale(unit: str | None) -> int | None:
    """How a percent-formatted cell reads under *unit*: 100 (the number shown, 50 for a
    stored 0.5) under a % unit, 1 (the number stored) under a dimensionless one, None under
    any other unit."""
    from comparo.base import units

    if is_percent_unit(unit or "1"):
        return 100
    try:
        return None if units.unit_dimensions(unit or "1") else 1
    except Exception:  # a unit pint cannot read is reported by the header checks
        return None


def parse_cell(v: Any, decimal_comma: bool) -> tuple[str | None, str, str]:
    """A cell as number text (``'12.5'``), or ``None`` with a message and a hint.
    Number cells of a workbook are taken as they are; text is read with '.' as the decimal
    mark, or ',' with *decimal_comma* ('.' or a space then group thousands)."""
    if isinstance(v, float):
        if not math.isfinite(v):
            return None, "not a finite number", ""
        return (str(int(v)) if v.is_integer() and abs(v) < 1e15 else repr(v)), "", ""
    t = str(v).strip()
    if _THOUSANDS_SPACE.match(t):
        t = re.sub(r"[ \u00a0\u202f\u2009]", "", t)
    if decimal_comma:
        if re.fullmatch(r"[-+]?\d{1,3}(\.\d{3})+(,\d+)?([eE][-+]?\d+)?", t):
            t = t.replace(".", "")
        elif "." in t:
            return (
                None,
                "a number with '.' in a table read with decimal commas",
                "write the number with ',' as the decimal mark, as the rest of the table",
            )
        t = t.replace(",", ".", 1) if t.count(",") == 1 else t
    if not _PLAIN.match(t):
        return None, "not a number", _hint(t, decimal_comma)
    x = float(t)
    if math.isinf(x):
        return None, "beyond the range of a double", "a mistyped exponent?"
    if x == 0 and re.search(r"[1-9]", t.split("e")[0].split("E")[0]):
        return (
            None,
            "below the smallest number a double holds (it would read as 0)",
            "a mistyped exponent?",
        )
    return t, "", ""


PLUS_MINUS_KINDS = ("sd", "se", "ci95", "range_half")
_PLUS_MINUS = re.compile(
    r"^\s*(?P<value>[^±+]*?\S)\s*(?:±|\+\s*/\s*[-−]|\+\s*[-−])\s*(?P<spread>\S.*?)\s*$"
)


def split_plus_minus(v: Any) -> tuple[str, str] | None:
    """``'12.5 ± 0.3'`` (also ``+/-``, ``+-``) -> ``('12.5', '0.3')``; None for any other cell."""
    if not isinstance(v, str):
        return None
    m = _PLUS_MINUS.match(v)
    return (m.group("value"), m.group("spread")) if m else None


SPREAD_EXAMPLE = "'Body mass SD (g)'"


def _hint(t: str, decimal_comma: bool) -> str:
    if not decimal_comma and re.fullmatch(r"[-+]?\d+,\d+", t):
        return (
            "a decimal comma? rerun with --decimal-comma if the whole table uses them, or write '.'"
        )
    if not decimal_comma and re.fullmatch(r"[-+]?\d{1,3}(,\d{3})+(\.\d+)?", t):
        return "a ',' between thousands? remove it"
    if t[:1] in "<>≤≥~":
        return (
            "a bound or approximate value is not a number: put the number in the cell and the "
            "qualifier in a notes column"
        )
    if split_plus_minus(t) is not None:
        return (
            "a value with its spread: rerun with --plus-minus KIND (sd, se, ci95 or range_half: "
            "what the ± "
            "means in the source) to split such cells, or put the spread in its own column, e.g. "
            + SPREAD_EXAMPLE
        )
    if re.match(r"^[-+]?\d[\d.,]*\s*[A-Za-zµμ%°]", t):
        return "a unit typed into the cell? the unit belongs in the header, e.g. 'Body mass (g)'"
    return "give a plain number (empty cells make no row)"
