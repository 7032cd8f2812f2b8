"""How numbers, booleans and table cells read in the report.

Numbers show 4 significant figures without an exponent between 1e-4 and 1e6, integers
in full, booleans as yes/no; every numeric cell keeps the full value in ``data-value``
(for sorting and for checks that the HTML equals the tables).
"""

from __future__ import annotations

import html
import math
from typing import Any

from markupsafe import Markup


def _is_int(v: Any) -> bool:
    return isinstance(v, int) or (hasattr(v, "dtype") and getattr(v.dtype, "kind", "") in "iu")


def num(v: Any, digits: int = 4) -> str:
    """*v* to *digits* significant figures; integers in full; ``n/a`` when not a finite number."""
    if isinstance(v, bool) or (hasattr(v, "dtype") and getattr(v.dtype, "kind", "") == "b"):
        return "yes" if v else "no"
    if _is_int(v):
        return str(int(v))
    try:
        f = float(v)
    except (TypeError, ValueError):
        return "n/a"
    if not math.isfinite(f):
        return "n/a"
    if f == 0:
        return "0"
    if f.is_integer() and abs(f) < 1e15 and abs(f) >= 10 ** (digits - 1):
        return str(int(f))
    e = math.floor(math.log10(abs(f)))
    if -4 <= e < 6:
        text = f"{f:.{max(digits - 1 - e, 0)}f}"
        return text.rstrip("0").rstrip(".") if "." in text else text
    mant, exp = f"{f:.{digits - 1}e}".split("e")
    mant = mant.rstrip("0").rstrip(".") if "." in mant else mant
    return f"{mant}e{int(exp)}"


def esc(v: Any) -> str:
    return html.escape("" if v is None else str(v))


def cell(v: Any) -> Markup:
    """A ``<td>``: numbers right-aligned with their full value in ``data-value``; yes/no for booleans."""
    if v is None:
        return Markup("<td></td>")
    if isinstance(v, bool) or (hasattr(v, "dtype") and getattr(v.dtype, "kind", "") == "b"):
        return Markup(f"<td>{'yes' if v else 'no'}</td>")
    if isinstance(v, int | float) or hasattr(v, "dtype"):
        try:
            f = float(v)
        except (TypeError, ValueError):
            return Markup(f"<td>{esc(v)}</td>")
        if f != f:
            return Markup("<td></td>")
        return Markup(f'<td class="n" data-value="{f!r}">{num(v)}</td>')
    return Markup(f"<td>{esc(v)}</td>")


def head(name: Any) -> Markup:
    """A column name that may break after its underscores (narrow tables)."""
    return Markup(esc(name).replace("_", "_<wbr>"))


def pretty_unit(unit: str) -> str:
    """A canonical unit as people write it (``µm``, ``1/s``); ``1`` reads ``dimensionless``."""
    from comparo.base.units import pretty

    text = pretty(str(unit))
    return "dimensionless" if text == "1" else text
