"""How a number reads in text: the one number formatter of comparo.

Two styles, one function (:func:`number`):

* the short style of printed summaries and figure labels: ``digits`` significant figures in
  Python's ``g`` format (``0.2515``, ``1.2346e+05``); *missing* for ``None``, NaN and infinity;
* the plain style of the report (``plain=True``): no exponent between 1e-4 and 1e6, integers in
  full, booleans as yes/no, trailing zeros dropped (``1.5e-05``, ``123456``).

Standard library only: importing it costs nothing.
"""

from __future__ import annotations

import math
from typing import Any


def _is_bool(v: Any) -> bool:
    return isinstance(v, bool) or getattr(getattr(v, "dtype", None), "kind", "") == "b"


def _is_int(v: Any) -> bool:
    return isinstance(v, int) or getattr(getattr(v, "dtype", None), "kind", "") in ("i", "u")


def _plain(f: float, digits: int) -> str:
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


def number(v: Any, digits: int = 4, missing: str = "n/a", *, plain: bool = False) -> str:
    """*v* as text to *digits* significant figures; *missing* when it is not a finite number.

    ``plain=False`` (printed summaries): Python's ``g`` format, ``f"{v:.{digits}g}"``.
    ``plain=True`` (the report): booleans read yes/no, integers in full, no exponent between
    1e-4 and 1e6, trailing zeros dropped. The value keeps its unit: the caller names it.
    """
    if plain and _is_bool(v):
        return "yes" if v else "no"
    if plain and _is_int(v):
        return str(int(v))
    if v is None:
        return missing
    try:
        f = float(v)
    except (TypeError, ValueError):
        return missing
    if not math.isfinite(f):
        return missing
    return _plain(f, digits) if plain else f"{f:.{digits}g}"
