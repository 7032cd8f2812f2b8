"""The grammar of user ratios (``*``, ``/``, ``^`` and parentheses over quantity keys),
parsed by a small parser of our own, never by eval.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any

_TOKEN = re.compile(
    r"\s*(?:(?P<num>\d+(?:\.\d*)?(?:[eE][+-]?\d+)?|\.\d+(?:[eE][+-]?\d+)?)|(?P<name>[A-Za-z_][A-Za-z0-9_]*)|(?P<op>[*/^()+-]))"
)


@dataclass(frozen=True)
class Ratio:
    """A user quantity y = constant · Π key^exponent, parsed from an expression."""

    name: str
    expression: str
    constant: float
    exponents: tuple[tuple[str, float], ...]

    def to_dict(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "expression": self.expression,
            "constant": self.constant,
            "exponents": {k: p for k, p in self.exponents},
        }


class _Parser:
    """expr := term (('*' | '/') term)* ; term := atom ['^' exponent] ;
    atom := NAME | NUMBER | '(' expr ')' ; exponent := ['-'] NUMBER | '(' ['-'] NUMBER ['/' NUMBER]
    ')'."""

    def __init__(self, text: str):
        self.tokens: list[tuple[str, str]] = []
        pos = 0
        text = text.rstrip()
        while pos < len(text):
            m = _TOKEN.match(text, pos)
            if not m or m.end() == pos:
                raise ValueError(
                    f"unexpected character {text[pos:].lstrip()[:1]!r} at position {pos + 1}"
                )
            kind = m.lastgroup
            self.tokens.append((kind, m.group(kind)))
            pos = m.end()
        self.i = 0

    def peek(self) -> tuple[str, str] | None:
        return self.tokens[self.i] if self.i < len(self.tokens) else None

    def take(self, value: str | None = None, kind: str | None = None) -> str:
        tok = self.peek()
        if (
            tok is None
            or (value is not None and tok[1] != value)
            or (kind is not None and tok[0] != kind)
        ):
            want = repr(value) if value else (kind or "more")
            got = "the end" if tok is None else repr(tok[1])
            raise ValueError(f"expected {want} but found {got}")
        self.i += 1
        return tok[1]

    def parse(self) -> tuple[float, dict[str, float]]:
        if not self.tokens:
            raise ValueError("the expression is empty")
        c, e = self.expr()
        if self.peek() is not None:
            raise ValueError(f"unexpected {self.peek()[1]!r} after a complete expression")
        return c, e

    def expr(self) -> tuple[float, dict[str, float]]:
        c, e = self.term()
        while self.peek() and self.peek()[1] in "*/":
            op = self.take()
            c2, e2 = self.term()
            sign = 1.0 if op == "*" else -1.0
            c = c * c2 if op == "*" else c / c2
            for k, p in e2.items():
                e[k] = e.get(k, 0.0) + sign * p
        return c, e

    def term(self) -> tuple[float, dict[str, float]]:
        c, e = self.atom()
        if self.peek() and self.peek()[1] == "^":
            self.take("^")
            p = self.exponent()
            if self.peek() and self.peek()[1] == "^":
                raise ValueError("write a^(p*q) instead of a chained power a^p^q")
            c = c**p
            e = {k: v * p for k, v in e.items()}
        return c, e

    def atom(self) -> tuple[float, dict[str, float]]:
        tok = self.peek()
        if tok is None:
            raise ValueError("the expression ends too early")
        if tok[0] == "name":
            self.take()
            return 1.0, {tok[1]: 1.0}
        if tok[0] == "num":
            self.take()
            v = float(tok[1])
            if v <= 0:
                raise ValueError("a constant factor must be positive")
            return v, {}
        if tok[1] == "(":
            self.take("(")
            out = self.expr()
            self.take(")")
            return out
        raise ValueError(f"unexpected {tok[1]!r}")

    def exponent(self) -> float:
        paren = self.peek() is not None and self.peek()[1] == "("
        if paren:
            self.take("(")
        sign = 1.0
        if self.peek() and self.peek()[1] in "+-":
            sign = -1.0 if self.take() == "-" else 1.0
        p = float(self.take(kind="num"))
        if paren:
            if self.peek() and self.peek()[1] == "/":
                self.take("/")
                q = float(self.take(kind="num"))
                if q == 0:
                    raise ValueError("division by zero in an exponent")
                p = p / q
            self.take(")")
        return sign * p


#: Decimal exponent beyond which a ratio value over- or underflows a double (1.8e308, 2.2e-308).
DOUBLE_DECADES = 307.0
#: Decades assumed for a quantity without a plausible range when bounding a ratio (SI units).
_NO_RANGE_DECADES = (-30.0, 30.0)


def _decades(catalog, key: str) -> tuple[float, float]:
    """log10 of the plausible range of *key* in SI base units (wide when unknown)."""
    from comparo.base.units import base_factor

    if key not in catalog or catalog[key].range is None:
        return _NO_RANGE_DECADES
    q = catalog[key]
    lo, hi = q.range
    if not (lo > 0 and hi > 0):
        return _NO_RANGE_DECADES
    to_si = base_factor(q.unit)
    return math.log10(lo * to_si), math.log10(hi * to_si)


def ratio_overflow(ratio: Ratio, catalog) -> str:
    """Why *ratio* can leave the range of a double (1e-307..1e307, SI) over the plausible
    ranges of its quantities, or ``""`` when it cannot."""
    if not (math.isfinite(ratio.constant) and ratio.constant > 0):
        return f"the constant of ratio {ratio.name!r} is beyond a double"
    lo = hi = math.log10(ratio.constant)
    for k, p in ratio.exponents:
        a, b = (p * d for d in _decades(catalog, k))
        lo, hi = lo + min(a, b), hi + max(a, b)
    if hi <= DOUBLE_DECADES and lo >= -DOUBLE_DECADES:
        return ""
    return (
        f"ratio {ratio.name!r} would span 1e{lo:.0f} to 1e{hi:.0f} (SI) over the plausible ranges "
        f"of its "
        "quantities, beyond what a double holds (1e-307 to 1e307)"
    )


def parse_ratio(name: str, expression: str) -> Ratio:
    """Parse a user ratio such as ``"fiber_length / fiber_radius"``.

    Grammar: products (``*``), quotients (``/``), powers (``^`` with a number,
    ``^2``, ``^-1``, ``^(1/2)``), parentheses, quantity keys and positive number
    constants. Nothing is evaluated as code.

    Raises
    ------
    ValueError
        Naming the problem and where it is.
    """
    if not isinstance(expression, str):
        raise ValueError("the expression must be a string")
    if len(expression) > 300:
        raise ValueError("the expression is longer than 300 characters")
    c, e = _Parser(expression).parse()
    e = {k: p for k, p in e.items() if p != 0.0}
    return Ratio(name, expression, float(c), tuple(e.items()))
