"""How numbers, booleans and table cells read in the report.

Numbers show 4 significant figures without an exponent between 1e-4 and 1e6, integers
in full, booleans as yes/no; every numeric cell keeps the full value in ``data-value``
(for sorting and for checks that the HTML equals the tables).
"""

from __future__ import annotations

import html
from typing import Any

from markupsafe import Markup

from comparo.base.numbers import number


def num(v: Any, digits: int = 4) -> str:
    """*v* to *digits* significant figures in the report's plain style; ``n/a`` when not a finite
    number (:func:`comparo.base.numbers.number` with ``plain=True``)."""
    return number(v, digits, plain=True)


def esc(v: Any) -> str:
    return html.escape("" if v is None else str(v))


def cell(v: Any) -> Markup:
    """A ``<td>``: numbers right-aligned with their full value in ``data-value``; yes/no for
    booleans."""
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
