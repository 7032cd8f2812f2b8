"""One-dimensional searches for the lambda fit: Brent's bounded minimiser and Brent's root
finder, each to a stated absolute tolerance on its argument.

They are the classical algorithms (Brent RP 1973, Algorithms for Minimization without
Derivatives, Prentice-Hall, chapters 4 and 5: golden-section steps safeguarding
parabolic interpolation; bisection safeguarding secant and inverse quadratic steps),
written here because importing scipy.optimize costs a noticeable part of a PGLS
command's start-up; the tests compare them with scipy.optimize on the same functions.
"""

from __future__ import annotations

import math
from collections.abc import Callable

_GOLD = 0.5 * (3.0 - math.sqrt(5.0))  # 0.381966...
_SQRT_EPS = math.sqrt(2.2e-16)


def minimize_bounded(
    fun: Callable[[float], float], a: float, b: float, xatol: float, maxiter: int = 500
) -> float:
    """The minimiser of *fun* on [a, b] to within *xatol* (absolute), by Brent's method.

    For a function unimodal on [a, b] the result is within *xatol* of its minimiser
    (interior or at an end); the ends themselves are never evaluated.
    """
    if not a < b:
        return a
    x = w = v = a + _GOLD * (b - a)
    fx = fw = fv = fun(x)
    d = e = 0.0
    for _ in range(maxiter):
        xm = 0.5 * (a + b)
        tol1 = _SQRT_EPS * abs(x) + xatol / 3.0
        tol2 = 2.0 * tol1
        if abs(x - xm) <= tol2 - 0.5 * (b - a):
            break
        golden = True
        if abs(e) > tol1:  # try a parabola through x, w, v
            r = (x - w) * (fx - fv)
            q = (x - v) * (fx - fw)
            p = (x - v) * q - (x - w) * r
            q = 2.0 * (q - r)
            if q > 0.0:
                p = -p
            q = abs(q)
            if abs(p) < abs(0.5 * q * e) and q * (a - x) < p < q * (b - x):
                e, d = d, p / q
                u = x + d
                if u - a < tol2 or b - u < tol2:
                    d = tol1 if xm >= x else -tol1
                golden = False
        if golden:
            e = (b - x) if x < xm else (a - x)
            d = _GOLD * e
        u = x + (d if abs(d) >= tol1 else (tol1 if d >= 0 else -tol1))
        fu = fun(u)
        if fu <= fx:
            if u < x:
                b = x
            else:
                a = x
            v, fv, w, fw, x, fx = w, fw, x, fx, u, fu
        else:
            if u < x:
                a = u
            else:
                b = u
            if fu <= fw or w == x:
                v, fv, w, fw = w, fw, u, fu
            elif fu <= fv or v == x or v == w:
                v, fv = u, fu
    return x


def root_bracketed(
    fun: Callable[[float], float],
    a: float,
    b: float,
    xtol: float,
    fa: float | None = None,
    fb: float | None = None,
    maxiter: int = 200,
) -> float:
    """A root of *fun* in [a, b] (``fun(a)`` and ``fun(b)`` of opposite signs) to within
    *xtol* (absolute), by Brent's method; known end values may be passed as *fa*, *fb*."""
    fa = fun(a) if fa is None else fa
    fb = fun(b) if fb is None else fb
    if fa == 0.0:
        return a
    if fb == 0.0:
        return b
    if (fa > 0) == (fb > 0):
        raise ValueError("the ends do not bracket a root")
    c, fc = a, fa
    d = e = b - a
    for _ in range(maxiter):
        if (fb > 0) == (fc > 0):
            c, fc = a, fa
            d = e = b - a
        if abs(fc) < abs(fb):
            a, b, c = b, c, b
            fa, fb, fc = fb, fc, fb
        tol = 2.0 * 2.2e-16 * abs(b) + 0.5 * xtol
        m = 0.5 * (c - b)
        if abs(m) <= tol or fb == 0.0:
            return b
        if abs(e) >= tol and abs(fa) > abs(fb):
            s = fb / fa
            if a == c:  # secant
                p, q = 2.0 * m * s, 1.0 - s
            else:  # inverse quadratic interpolation
                q, r = fa / fc, fb / fc
                p = s * (2.0 * m * q * (q - r) - (b - a) * (r - 1.0))
                q = (q - 1.0) * (r - 1.0) * (s - 1.0)
            if p > 0:
                q = -q
            else:
                p = -p
            if 2.0 * p < min(3.0 * m * q - abs(tol * q), abs(e * q)):
                e, d = d, p / q
            else:
                d = e = m
        else:
            d = e = m
        a, fa = b, fb
        b += d if abs(d) > tol else (tol if m > 0 else -tol)
        fb = fun(b)
    return b
