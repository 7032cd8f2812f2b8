"""Lines per group and the group comparisons: one exponent for all groups, the same height
at the common exponent, and offsets along the common line.

Warton, D. I. & Weber, N. C. (2002). Common slope tests for bivariate errors-
    in-variables models. Biometrical Journal 44, 161-174.
Warton, D. I., Wright, I. J., Falster, D. S. & Westoby, M. (2006). Bivariate
    line-fitting methods for allometry. Biological Reviews 81, 259-291.
"""

from __future__ import annotations

import math

import numpy as np

from comparo.fitting.core import moments, slope_from_moments
from comparo.fitting.dispatch import line_core
from comparo.fitting.numbers import NAN


def _lr_terms(b: float, groups: list[tuple[np.ndarray, np.ndarray]], method: str) -> float:
    """Sum over groups of -n_i ln(1 - r_i(b)^2), the LR statistic for slope b in every group."""
    total = 0.0
    for X, Y in groups:
        rho = Y - b * X
        f = Y + b * X if method == "sma" else X + b * Y
        r = np.corrcoef(rho, f)[0, 1]
        total += -len(X) * math.log(max(1 - r * r, 1e-300))
    return total


def common_slope_model2(
    groups: list[tuple[np.ndarray, np.ndarray]],
    method: str,
    ci: float = 0.95,
    *,
    with_ci: bool = True,
) -> dict:
    """Common SMA/MA slope across groups and the LR test of equal slopes (Warton & Weber 2002).

    Notes
    -----
    Within group i, r_i(b) = corr(Y - bX, fitted axis) (Y + bX for SMA, X + bY for MA);
    -2 ln Lambda_i(b) = -n_i ln(1 - r_i(b)^2) under bivariate normality. The common slope
    minimises T(b) = sum_i -n_i ln(1 - r_i(b)^2); T(b_c) ~ chi^2(g - 1) under equal slopes.
    CI: the slopes with T(b) - T(b_c) <= chi^2(ci; 1) (profile likelihood).
    """
    from scipy import optimize, stats

    slopes = []
    for X, Y in groups:
        _, _, sxx, syy, sxy = moments(X, Y)
        slopes.append(float(slope_from_moments(method, sxx, syy, sxy)))
    slopes_arr = np.array(slopes)
    sign = np.sign(np.median(slopes_arr)) or 1.0
    same = slopes_arr[np.sign(slopes_arr) == sign]
    lo_b, hi_b = float(same.min()), float(same.max())
    if hi_b - lo_b < 1e-12:
        b_c = lo_b
    else:
        res = optimize.minimize_scalar(
            lambda b: _lr_terms(b, groups, method),
            bounds=(lo_b, hi_b),
            method="bounded",
            options={"xatol": 1e-10},
        )
        b_c = float(res.x)
    T = _lr_terms(b_c, groups, method)
    g = len(groups)
    crit = stats.chi2.ppf(ci, 1)

    def excess(b: float) -> float:
        return _lr_terms(b, groups, method) - T - crit

    def root(direction: float) -> float:
        step = max(abs(b_c) * 0.05, 1e-3)
        far = b_c
        for _ in range(60):
            far = far + direction * step
            if (method == "sma" and np.sign(far) != np.sign(b_c)) or excess(far) > 0:
                break
            step *= 1.6
        else:
            return NAN
        if excess(far) <= 0:
            return NAN
        return float(optimize.brentq(excess, min(b_c, far), max(b_c, far), xtol=1e-10))

    return {
        "slope": b_c,
        "slope_ci": [root(-1.0), root(1.0)] if with_ci else None,
        "test": "LR chi2",
        "statistic": float(T),
        "df": g - 1,
        "p": float(stats.chi2.sf(T, g - 1)),
    }


def _wald_means(
    values: list[np.ndarray], deriv: np.ndarray | None = None, var_b: float = 0.0
) -> dict:
    """Wald test that g group means are equal, allowing for the estimated common slope.

    The mean m_i of each group's values (e.g. Y - b X) has variance s_i^2/n_i;
    all means share the error of the common slope b, so
    Cov(m) = diag(s_i^2/n_i) + Var(b) d d' with d_i = dm_i/db. With contrasts
    L = [I | -1], W = (L m)' (L Cov L')^-1 (L m) ~ chi^2(g - 1).
    """
    from scipy import stats

    m = np.array([v.mean() for v in values])
    cov = np.diag([v.var(ddof=1) / len(v) for v in values])
    if deriv is not None:
        cov = cov + var_b * np.outer(deriv, deriv)
    g = len(values)
    L = np.column_stack([np.eye(g - 1), -np.ones(g - 1)])
    d = L @ m
    W = float(d @ np.linalg.solve(L @ cov @ L.T, d))
    return {
        "test": "Wald chi2",
        "statistic": W,
        "df": g - 1,
        "p": float(stats.chi2.sf(W, g - 1)),
        "means": [float(v) for v in m],
    }


def _common_slope_variance(
    b: float, groups: list[tuple[np.ndarray, np.ndarray]], method: str
) -> float:
    """Var(b_c) from the curvature of the LR profile: 2 / T''(b_c) (central difference)."""
    h = 1e-4 * max(1.0, abs(b))
    d2 = (
        _lr_terms(b + h, groups, method)
        - 2 * _lr_terms(b, groups, method)
        + _lr_terms(b - h, groups, method)
    ) / (h * h)
    return 2.0 / d2 if d2 > 0 else math.inf


def _group_tests_ols(X: np.ndarray, Y: np.ndarray, codes: np.ndarray, g: int, ci: float) -> dict:
    """OLS: interaction F test of equal slopes, common slope (parallel lines), F test of
    elevation."""
    import statsmodels.api as sm

    dummies = np.eye(g)[codes][:, 1:]
    base = sm.add_constant(X, has_constant="add")
    parallel = np.column_stack([base, dummies])
    full = np.column_stack([parallel, dummies * X[:, None]])
    r0 = sm.OLS(Y, base).fit()
    r1 = sm.OLS(Y, parallel).fit()
    r2 = sm.OLS(Y, full).fit()
    F, p, df = r2.compare_f_test(r1)
    Fe, pe, dfe = r1.compare_f_test(r0)
    lo, hi = np.asarray(r1.conf_int(alpha=1 - ci))[1]
    alpha = r1.params[0]
    elev = [float(alpha)] + [float(alpha + d) for d in r1.params[2:]]
    return {
        "common_slope": {
            "slope": float(r1.params[1]),
            "slope_ci": [float(lo), float(hi)],
            "test": "F (interaction)",
            "statistic": float(F),
            "df": [int(df), int(r2.df_resid)],
            "p": float(p),
        },
        "elevation": {
            "test": "F",
            "statistic": float(Fe),
            "df": [int(dfe), int(r1.df_resid)],
            "p": float(pe),
            "means": elev,
        },
        "shift": None,
    }


def group_fits(
    X: np.ndarray,
    Y: np.ndarray,
    groups: np.ndarray,
    method: str,
    ci: float,
    against: float | None,
    seed: int,
) -> tuple[list[dict], dict | None, list[str]]:
    """Per-group fits and, for ols/sma/ma, the common-slope, elevation and shift tests (all of
    them, whatever the equal-slopes test says; :func:`judge_slopes` applies the rule)."""
    names = list(dict.fromkeys(groups.tolist()))
    rows, usable, notes = [], [], []
    for name in names:
        m = groups == name
        row: dict = {"group": name, "n": int(m.sum())}
        if m.sum() < 3 or np.ptp(X[m]) == 0:
            row.update(
                slope=None, slope_ci=None, intercept=None, intercept_ci=None, r2=None, against=None
            )
            notes.append(
                f"group {name!r} has fewer than 3 distinct x values: no per-group line, left out "
                f"of group tests"
            )
        else:
            c = line_core(method, X[m], Y[m], ci, against, seed)
            row.update(
                slope=c.slope,
                slope_ci=list(c.slope_ci),
                intercept=c.intercept,
                intercept_ci=list(c.intercept_ci),
                r2=c.r2,
                against=c.test,
            )
            usable.append(name)
        rows.append(row)
    tests = None
    if len(usable) >= 2 and method in ("ols", "sma", "ma"):
        keep = np.isin(groups, usable)
        Xk, Yk, Gk = X[keep], Y[keep], groups[keep]
        if method == "ols":
            codes = np.array([usable.index(v) for v in Gk])
            tests = _group_tests_ols(Xk, Yk, codes, len(usable), ci)
        else:
            parts = [(Xk[Gk == u], Yk[Gk == u]) for u in usable]
            cs = common_slope_model2(parts, method, ci)
            b = cs["slope"]
            var_b = _common_slope_variance(b, parts, method)
            cs["se"] = math.sqrt(var_b)
            elev = _wald_means(
                [Yp - b * Xp for Xp, Yp in parts], np.array([-Xp.mean() for Xp, _ in parts]), var_b
            )
            if method == "sma":
                shift = _wald_means(
                    [Yp + b * Xp for Xp, Yp in parts],
                    np.array([Xp.mean() for Xp, _ in parts]),
                    var_b,
                )
            else:
                shift = _wald_means(
                    [Xp + b * Yp for Xp, Yp in parts],
                    np.array([Yp.mean() for _, Yp in parts]),
                    var_b,
                )
            tests = {"common_slope": cs, "elevation": elev, "shift": shift}
        tests["groups"] = usable
    elif len(usable) >= 2:
        notes.append(f"common-slope tests are available for ols, sma and ma, not {method}")
    return rows, tests, notes


def judge_slopes(tests: dict | None, ci: float) -> dict | None:
    """The group tests with the verdict on equal slopes, at alpha = 1 - ci.

    Adds ``slopes_differ`` (equal slopes rejected: p < alpha) and ``alpha``. The
    elevation and shift tests compare groups along one common slope, so they are
    meaningful only when equal slopes are not rejected: then ``assumes`` says so;
    when equal slopes are rejected both are set to None and ``omitted`` says why
    (rule of docs/methods/fitting.md, "Comparing groups"). The common-slope estimate stays in
    the dict beside its test, but no summary presents it as the groups' exponent.
    """
    if not tests or not tests.get("common_slope"):
        return tests
    p = tests["common_slope"].get("p")
    alpha = 1.0 - float(ci)
    out = dict(tests, alpha=alpha)
    if p is None or not math.isfinite(p):
        out["slopes_differ"] = None
        return out
    out["slopes_differ"] = bool(p < alpha)
    if out["slopes_differ"]:
        dropped = [k for k in ("elevation", "shift") if out.get(k)]
        out["elevation"] = out["shift"] = None
        if dropped:
            tests_word = (
                f"the {' and '.join(dropped)} tests, which assume"
                if len(dropped) > 1
                else f"the {dropped[0]} test, which assumes"
            )
            verb = "are" if len(dropped) > 1 else "is"
            out["omitted"] = (
                f"equal slopes rejected (p = {p:.3g} < {alpha:g}): the groups differ in slope, so "
                f"{tests_word} one common slope, {verb} not given"
            )
    else:
        out["assumes"] = (
            f"equal slopes not rejected (p = {p:.3g} >= {alpha:g}): the elevation and "
            "shift tests assume the groups share the common slope"
        )
    return out
