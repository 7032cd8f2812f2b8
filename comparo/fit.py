"""Scaling (allometric) line fits with confidence intervals, tests and flags.

The model is Y = alpha + beta X on the fitted scale, with X = log(x) and
Y = log(y) by default (base 10; ``log="e"`` or ``"none"``), so that
y = 10^alpha x^beta. Methods:

``ols``     ordinary least squares of Y on X (statsmodels OLS). Assumes X is
            measured without error; error in X attenuates the slope.
``sma``     standardized major axis, beta = sign(r) s_Y / s_X (model II).
``ma``      major axis, the leading eigenvector of the covariance (model II;
            not invariant to the scale of the axes, so use it on log data).
``robust``  Huber M-estimation (statsmodels RLM, c = 1.345, MAD scale) with
            its final weights reported; resists outlying Y, not leverage points.
``lts``     least trimmed squares (h = floor((n + p + 1)/2)) by concentration
            steps from all (or many) two-point starts, then a reweighted
            least-squares fit on the points whose |LTS residual| <= 2.5 scale.
``pgls``    phylogenetic GLS, computed by :mod:`comparo.phylo`.

All moments use the divisor n - 1. Nothing is dropped silently: rows with a
missing or non-numeric value, or a non-positive value under a log transform,
are listed in ``excluded`` with the reason.

References
----------
Warton, D. I., Wright, I. J., Falster, D. S. & Westoby, M. (2006). Bivariate
    line-fitting methods for allometry. Biological Reviews 81, 259-291.
Warton, D. I. & Weber, N. C. (2002). Common slope tests for bivariate errors-
    in-variables models. Biometrical Journal 44, 161-174.
Pitman, E. J. G. (1939). A note on normal correlation. Biometrika 31, 9-12.
Huber, P. J. (1964). Robust estimation of a location parameter. Annals of
    Mathematical Statistics 35, 73-101.
Rousseeuw, P. J. (1984). Least median of squares regression. Journal of the
    American Statistical Association 79, 871-880.
Rousseeuw, P. J. & Van Driessen, K. (2006). Computing LTS regression for large
    data sets. Data Mining and Knowledge Discovery 12, 29-45.
Muggeo, V. M. R. (2003). Estimating regression models with unknown break-
    points. Statistics in Medicine 22, 3055-3071.
Davies, R. B. (1987). Hypothesis testing when a nuisance parameter is present
    only under the alternative. Biometrika 74, 33-43.
Efron, B. (1987). Better bootstrap confidence intervals. Journal of the
    American Statistical Association 82, 171-185.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.errors import UsageError

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

METHODS = ("ols", "sma", "ma", "robust", "lts", "pgls")
LOGS = ("10", "e", "none")
HUBER_C = 1.345
LTS_CUT = 2.5
_NAN = float("nan")


# --------------------------------------------------------------------------- result


@dataclass(frozen=True)
class FitResult:
    """A fitted scaling line Y = intercept + slope X on the fitted (log) scale.

    Attributes
    ----------
    method, x, y, log : str
        Method, the x and y columns, and the log base (``"10"``, ``"e"``, ``"none"``).
    n : int
        Points used.
    slope : float
        Exponent beta (dimensionless on log-log axes).
    slope_ci : tuple of float
        Confidence interval of the slope at ``ci_level``; NaN where unbounded.
    intercept : float
        alpha, on the fitted scale: log of y (in y's unit) at x = 1 (x's unit).
    intercept_ci : tuple of float
    r2 : float
        Squared correlation (ols, sma, ma), weighted R^2 (robust) or R^2 of
        the reweighted fit (lts).
    ci_level : float
    test_slope : dict or None
        ``{"value", "statistic", "p"}``: t (ols, lts), z (robust) or F(1, n-2)
        (sma, ma) against slope = value.
    lambda_, lambda_ci, loglik : PGLS only.
    groups : list of dict or None
        Per-group fits when ``by`` is given.
    group_tests : dict or None
        Common-slope, elevation and shift tests when ``by`` is given.
    outliers : list of dict
        ``{"label", "reason", "statistic"}``, see :mod:`comparo.flags`.
    excluded : list of dict
        ``{"label", "reason"}`` for rows left out.
    breakpoint : dict or None
        Segmented fit when asked.
    bootstrap : dict or None
        Percentile and BCa intervals when resampling was asked.
    sensitivity : dict or None
        Filled by the sensitivity analysis (not by :func:`fit`).
    phylo : dict or None
        PGLS only: the further results of :func:`comparo.phylo.pgls_fit`
        (likelihood-ratio tests of lambda = 0 and 1, pruned tips, taxa without
        tips, sigma2, likelihood convention, measurement error).
    points : tuple of dict
        Per-point values: label, x_fit, y_fit, fitted, residual and, where
        the method has them, weight and lts_std.
    """

    method: str
    x: str
    y: str
    log: str
    n: int
    slope: float
    slope_ci: tuple[float, float]
    intercept: float
    intercept_ci: tuple[float, float]
    r2: float
    ci_level: float
    test_slope: dict | None = None
    lambda_: float | None = None
    lambda_ci: tuple[float, float] | None = None
    loglik: float | None = None
    groups: list[dict] | None = None
    group_tests: dict | None = None
    outliers: list[dict] = field(default_factory=list)
    excluded: list[dict] = field(default_factory=list)
    breakpoint: dict | None = None
    bootstrap: dict | None = None
    sensitivity: dict | None = None
    phylo: dict | None = None
    points: tuple[dict, ...] = field(default=(), repr=False)
    notes: tuple[str, ...] = ()
    refit_without_flagged: FlaggedRefit | None = None

    def to_dict(self) -> dict:
        """JSON-safe dict with the keys of the ``fit --format json`` contract.

        ``group_tests`` (with ``by``), ``bootstrap`` (with resampling) and
        ``refit_without_flagged`` (with ``drop_flagged``) are added only when
        they were computed.
        """
        out = {
            "method": self.method,
            "x": self.x,
            "y": self.y,
            "log": self.log,
            "n": int(self.n),
            "slope": _num(self.slope),
            "slope_ci": _pair(self.slope_ci),
            "intercept": _num(self.intercept),
            "intercept_ci": _pair(self.intercept_ci),
            "r2": _num(self.r2),
            "ci_level": float(self.ci_level),
            "test_slope": _json(self.test_slope),
            "lambda": _num(self.lambda_) if self.lambda_ is not None else None,
            "lambda_ci": _pair(self.lambda_ci) if self.lambda_ci is not None else None,
            "loglik": _num(self.loglik) if self.loglik is not None else None,
            "groups": _json(self.groups),
            "outliers": _json(list(self.outliers)),
            "excluded": _json(list(self.excluded)),
            "breakpoint": _json(self.breakpoint),
            "sensitivity": _json(self.sensitivity),
        }
        if self.group_tests is not None:
            out["group_tests"] = _json(self.group_tests)
        if self.bootstrap is not None:
            out["bootstrap"] = _json(self.bootstrap)
        if self.phylo is not None:
            out["phylo"] = _json(self.phylo)
        if self.refit_without_flagged is not None:
            out["refit_without_flagged"] = self.refit_without_flagged.to_dict()
        return out

    @classmethod
    def from_dict(cls, d: dict, *, points: tuple[dict, ...] = ()) -> FitResult:
        """Build a result from a contract dict (e.g. the PGLS fit of :mod:`comparo.phylo`)."""
        names = {f for f in cls.__dataclass_fields__}
        kw = {("lambda_" if k == "lambda" else k): v for k, v in d.items() if ("lambda_" if k == "lambda" else k) in names}
        for k in ("slope_ci", "intercept_ci", "lambda_ci"):
            if kw.get(k) is not None:
                kw[k] = tuple(_nan(v) for v in kw[k])
        for k in ("outliers", "excluded"):
            kw[k] = list(kw.get(k) or [])
        rest = {k: v for k, v in d.items() if ("lambda_" if k == "lambda" else k) not in names}
        if rest:
            kw["phylo"] = rest
        return cls(**kw, points=points)

    def to_frame(self) -> pd.DataFrame:
        """Estimates table: one row per (group, term) with estimate and CI."""
        import pandas as pd

        rows = [
            {"group": None, "term": "slope", "estimate": self.slope, "ci_low": self.slope_ci[0], "ci_high": self.slope_ci[1], "n": self.n},
            {"group": None, "term": "intercept", "estimate": self.intercept, "ci_low": self.intercept_ci[0], "ci_high": self.intercept_ci[1], "n": self.n},
            {"group": None, "term": "r2", "estimate": self.r2, "ci_low": _NAN, "ci_high": _NAN, "n": self.n},
        ]
        for g in self.groups or []:
            for term in ("slope", "intercept"):
                lo, hi = g.get(f"{term}_ci") or (_NAN, _NAN)
                rows.append({"group": g["group"], "term": term, "estimate": g.get(term), "ci_low": lo, "ci_high": hi, "n": g["n"]})
        if self.group_tests and self.group_tests.get("common_slope"):
            cs = self.group_tests["common_slope"]
            lo, hi = cs.get("slope_ci") or (_NAN, _NAN)
            rows.append({"group": "(common)", "term": "slope", "estimate": cs.get("slope"), "ci_low": lo, "ci_high": hi, "n": self.n})
        if self.breakpoint:
            bp = self.breakpoint
            for term, key in (("breakpoint_x", "x"), ("slope_left", "slope_left"), ("slope_right", "slope_right")):
                lo, hi = bp.get(f"{key}_ci") or (_NAN, _NAN)
                rows.append({"group": "(segmented)", "term": term, "estimate": bp.get(key), "ci_low": lo, "ci_high": hi, "n": self.n})
        if self.refit_without_flagged is not None:
            rows += self.refit_without_flagged.frame_rows()
        frame = pd.DataFrame(rows)
        frame.insert(0, "method", self.method)
        return frame

    def points_frame(self) -> pd.DataFrame:
        """Per-point table (fitted scale): label, x_fit, y_fit, fitted, residual, ..."""
        import pandas as pd

        return pd.DataFrame(list(self.points))

    def summary(self) -> str:
        """Plain-text account of the fit for people."""
        pct = f"{100 * self.ci_level:g}%"
        scale = {"10": "log10", "e": "ln", "none": "untransformed"}[self.log]
        lines = [
            f"{self.method.upper()} fit of {self.y} on {self.x} ({scale} axes), n = {self.n}",
            f"  slope      {_f(self.slope)}   {pct} CI {_f(self.slope_ci[0])} .. {_f(self.slope_ci[1])}",
            f"  intercept  {_f(self.intercept)}   {pct} CI {_f(self.intercept_ci[0])} .. {_f(self.intercept_ci[1])}",
            f"  r2         {_f(self.r2)}",
        ]
        if self.lambda_ is not None:
            lam_ci = self.lambda_ci or (_NAN, _NAN)
            lines.append(f"  lambda     {_f(self.lambda_)}   CI {_f(lam_ci[0])} .. {_f(lam_ci[1])}   loglik {_f(self.loglik)}")
        if self.test_slope:
            t = self.test_slope
            lines.append(f"  slope = {t['value']:g}?  statistic {_f(t['statistic'])}, p = {_p(t['p'])}")
        if self.bootstrap:
            b = self.bootstrap
            lines.append(f"  bootstrap ({b['resamples']} resamples, seed {b['seed']}):")
            for term in ("slope", "intercept"):
                per, bca = b[term]["percentile"], b[term]["bca"]
                lines.append(f"    {term:<9}  percentile {_f(per[0])} .. {_f(per[1])}   BCa {_f(bca[0])} .. {_f(bca[1])}")
        if self.groups:
            lines.append("  groups:")
            for g in self.groups:
                lo, hi = g.get("slope_ci") or (_NAN, _NAN)
                lines.append(f"    {str(g['group']):<16} n {g['n']:>4}  slope {_f(g.get('slope'))}  CI {_f(lo)} .. {_f(hi)}")
        if self.group_tests:
            gt = self.group_tests
            cs = gt.get("common_slope")
            if cs:
                lo, hi = cs.get("slope_ci") or (_NAN, _NAN)
                lines.append(f"  common slope {_f(cs.get('slope'))}  CI {_f(lo)} .. {_f(hi)}; "
                             f"equal slopes? {cs['test']} {_f(cs['statistic'])}, df {cs['df']}, p = {_p(cs['p'])}")
            for key, what in (("elevation", "equal elevation"), ("shift", "no shift along the common axis")):
                t = gt.get(key)
                if t:
                    lines.append(f"  {what}? {t['test']} {_f(t['statistic'])}, df {t['df']}, p = {_p(t['p'])}")
        if self.breakpoint:
            bp = self.breakpoint
            lines.append(
                f"  breakpoint at x = {_f(bp['x'])} (CI {_f(bp['x_ci'][0])} .. {_f(bp['x_ci'][1])}); "
                f"slopes {_f(bp['slope_left'])} | {_f(bp['slope_right'])}; single line? p = {_p(bp['p_single_line'])}"
            )
        if self.outliers:
            lines.append("  flags:")
            lines += [f"    {o['label']}: {o['reason']} ({_f(o['statistic'])})" for o in self.outliers]
        else:
            lines.append("  flags: none")
        if self.excluded:
            lines.append(f"  excluded ({len(self.excluded)}):")
            lines += [f"    {e['label']}: {e['reason']}" for e in self.excluded]
        lines += [f"  note: {s}" for s in self.notes]
        if self.refit_without_flagged is not None:
            lines.append(self.refit_without_flagged.summary(self))
        return "\n".join(lines)


@dataclass(frozen=True)
class FlaggedRefit:
    """The fit repeated without the points that broke the chosen flag rules.

    Asked with ``fit(..., drop_flagged=...)`` / ``--drop-flagged``; the original
    fit is kept and this refit is reported beside it. One pass: the refit's own
    flags are reported (in ``fit.outliers``) but nothing more is dropped.

    Attributes
    ----------
    rules : tuple of str
        Rule ids that caused a drop (see :func:`comparo.flags.drop_rules`).
    dropped : tuple of dict
        ``{"label", "rules", "reasons"}`` per dropped point, in point order.
    fit : FitResult or None
        The refit (None when nothing was dropped or the refit was impossible;
        ``note`` says why).
    slope_change : float or None
        Refit slope minus original slope (dimensionless on log-log axes).
    note : str or None
    """

    rules: tuple[str, ...]
    dropped: tuple[dict, ...]
    fit: FitResult | None
    slope_change: float | None = None
    note: str | None = None

    def to_dict(self) -> dict:
        """``{"rules", "dropped", "n_dropped", "slope_change", "fit", "note"}``; ``fit`` is a fit object."""
        return {
            "rules": list(self.rules),
            "dropped": _json([dict(d) for d in self.dropped]),
            "n_dropped": len(self.dropped),
            "slope_change": _num(self.slope_change),
            "fit": self.fit.to_dict() if self.fit is not None else None,
            "note": self.note,
        }

    def frame_rows(self) -> list[dict]:
        """Rows for :meth:`FitResult.to_frame`: the refit's estimates, then one row per dropped point."""
        rows = []
        r = self.fit
        if r is not None:
            for term, est, ci in (("slope", r.slope, r.slope_ci), ("intercept", r.intercept, r.intercept_ci),
                                  ("r2", r.r2, (_NAN, _NAN))):
                rows.append({"group": "(without flagged)", "term": term, "estimate": est, "ci_low": ci[0], "ci_high": ci[1], "n": r.n})
        for d in self.dropped:
            rows.append({"group": "(dropped)", "term": d["label"], "estimate": _NAN, "ci_low": _NAN, "ci_high": _NAN,
                         "n": _NAN, "flags": "; ".join(d["rules"])})
        return rows

    def summary(self, original: FitResult | None = None) -> str:
        pct = f"{100 * original.ci_level:g}%" if original is not None else "CI"
        lines = [f"  refit without flagged points (rules: {', '.join(self.rules) or 'none'}): "
                 f"{len(self.dropped)} dropped"]
        lines += [f"    dropped {d['label']}: {'; '.join(d['rules'])}" for d in self.dropped]
        r = self.fit
        if r is not None:
            was = f" (was {_f(original.slope)}, change {_f(self.slope_change)})" if original is not None else ""
            lines.append(f"    n = {r.n}  slope {_f(r.slope)}   {pct} CI {_f(r.slope_ci[0])} .. {_f(r.slope_ci[1])}{was}")
            lines.append(f"    intercept {_f(r.intercept)}   {pct} CI {_f(r.intercept_ci[0])} .. {_f(r.intercept_ci[1])}   r2 {_f(r.r2)}")
            if r.test_slope:
                t = r.test_slope
                lines.append(f"    slope = {t['value']:g}?  statistic {_f(t['statistic'])}, p = {_p(t['p'])}")
            if r.outliers:
                lines.append(f"    flags of the refit (not dropped): {', '.join(dict.fromkeys(o['label'] for o in r.outliers))}")
        if self.note:
            lines.append(f"    note: {self.note}")
        return "\n".join(lines)


# --------------------------------------------------------------------------- small helpers


def _nan(v: Any) -> float:
    return _NAN if v is None else float(v)


def _num(v: Any) -> float | None:
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def _pair(p: Any) -> list | None:
    if p is None:
        return None
    return [_num(p[0]), _num(p[1])]


def _json(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _json(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_json(v) for v in obj]
    if isinstance(obj, np.generic):
        obj = obj.item()
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    return obj


def _f(v: Any) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return f"{v:.5g}"


def _p(p: Any) -> str:
    if p is None or not math.isfinite(p):
        return "-"
    return f"{p:.3g}"


def _moments(X: np.ndarray, Y: np.ndarray, axis: int = -1):
    """Means, variances and covariance (divisor n - 1) along *axis*."""
    n = X.shape[axis]
    xm = X.mean(axis=axis, keepdims=True)
    ym = Y.mean(axis=axis, keepdims=True)
    dx, dy = X - xm, Y - ym
    sxx = (dx * dx).sum(axis=axis) / (n - 1)
    syy = (dy * dy).sum(axis=axis) / (n - 1)
    sxy = (dx * dy).sum(axis=axis) / (n - 1)
    return np.squeeze(xm, axis), np.squeeze(ym, axis), sxx, syy, sxy


def slope_from_moments(method: str, sxx, syy, sxy):
    """OLS, SMA or MA slope from (arrays of) second moments.

    OLS s_xy/s_xx; SMA sign(s_xy) sqrt(s_yy/s_xx); MA
    [s_yy - s_xx + sqrt((s_yy - s_xx)^2 + 4 s_xy^2)] / (2 s_xy) (Warton et al. 2006, Table 4).
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        if method == "ols":
            return sxy / sxx
        if method == "sma":
            return np.sign(sxy) * np.sqrt(syy / sxx)
        if method == "ma":
            d = syy - sxx
            return (d + np.sqrt(d * d + 4.0 * sxy * sxy)) / (2.0 * sxy)
    raise ValueError(method)


# --------------------------------------------------------------------------- core fits


@dataclass(frozen=True)
class _Core:
    slope: float
    slope_ci: tuple[float, float]
    intercept: float
    intercept_ci: tuple[float, float]
    r2: float
    test: dict | None
    fitted: np.ndarray
    weights: np.ndarray | None = None
    lts_std: np.ndarray | None = None
    note: str | None = None


def ols_line(X: np.ndarray, Y: np.ndarray, ci: float = 0.95, test_slope: float | None = None) -> _Core:
    """OLS of Y on X with t-based CIs and the t test of slope = test_slope.

    se(b) = s_e / (s_X sqrt(n - 1)), s_e^2 = RSS/(n - 2); t = (b - b0)/se(b) ~ t(n - 2).
    """
    import statsmodels.api as sm
    from scipy import stats

    res = sm.OLS(Y, sm.add_constant(X, has_constant="add")).fit()
    lo, hi = np.asarray(res.conf_int(alpha=1 - ci)).T
    a, b = res.params
    test = None
    if test_slope is not None:
        t = (b - test_slope) / res.bse[1]
        test = {"value": float(test_slope), "statistic": float(t), "p": float(2 * stats.t.sf(abs(t), res.df_resid))}
    return _Core(float(b), (float(lo[1]), float(hi[1])), float(a), (float(lo[0]), float(hi[0])), float(res.rsquared), test, res.fittedvalues)


def model2_test(X: np.ndarray, Y: np.ndarray, b0: float, method: str) -> tuple[float, float]:
    """Correlation-based test of slope = b0 for SMA or MA (Pitman 1939; Warton et al. 2006),
    aware of the sign and of the axis. Returns (F, p), F ~ F(1, n - 2).

    Notes
    -----
    Along the direction of angle t0 = arctan b0, rho = Y cos t0 - X sin t0 (the residual
    from a line of slope b0) is correlated with the fitted axis f only when the slope
    differs from b0; f = Y + b0 X for SMA, X cos t0 + Y sin t0 for MA. The plain statistic
    F = (n - 2) r^2 / (1 - r^2) cannot tell b0 from -b0 (SMA: it depends on b0^2) or the
    major from the minor axis (MA: it is the same at b0 and -1/b0). So:

    * SMA: the slope of an SMA line has the sign of r. A b0 of the other sign (or 0) is
      the limit b0 -> 0 of the same-sign side, where r(rho, f) -> 1: F = inf, p = 0.
    * MA: a direction nearer the minor axis than the major (more than 45 degrees from the
      fitted major axis) is tested as the 45-degree direction on its side, the closest a
      major axis can come to it: its p is that of the 45-degree direction.

    With these rules the exact intervals of :func:`model2_line` are exactly the slopes
    this test does not reject at the same level.
    """
    from scipy import stats

    n = len(X)
    X = np.asarray(X, dtype=float)
    Y = np.asarray(Y, dtype=float)
    if method == "sma":
        sxy = float(np.cov(X, Y)[0, 1])
        if b0 == 0 or (sxy != 0 and math.copysign(1.0, b0) != math.copysign(1.0, sxy)):
            return math.inf, 0.0
        rho, f = Y - b0 * X, Y + b0 * X
    else:
        _, _, sxx, syy, sxy = _moments(X, Y)
        theta_hat = 0.5 * math.atan2(2.0 * sxy, sxx - syy)  # angle of the major axis
        t0 = math.atan(b0) if math.isfinite(b0) else math.pi / 2
        phi = (t0 - theta_hat + math.pi / 2) % math.pi - math.pi / 2  # in [-pi/2, pi/2)
        if abs(phi) > math.pi / 4:
            t0 = theta_hat + math.copysign(math.pi / 4, phi)
        rho = Y * math.cos(t0) - X * math.sin(t0)
        f = X * math.cos(t0) + Y * math.sin(t0)
    r = np.corrcoef(rho, f)[0, 1]
    if not np.isfinite(r):
        r = 0.0
    F = (n - 2) * r * r / (1 - r * r) if abs(r) < 1 else math.inf
    return float(F), float(stats.f.sf(F, 1, n - 2))


def model2_line(X: np.ndarray, Y: np.ndarray, method: str, ci: float = 0.95, test_slope: float | None = None) -> _Core:
    """SMA or MA line with the exact (bivariate-normal) CIs of Warton et al. (2006).

    Notes
    -----
    SMA: b = sign(r) s_Y/s_X; CI b (sqrt(B + 1) -/+ sqrt(B)), B = F(ci; 1, n - 2)(1 - r^2)/(n - 2).
    MA: theta = arctan b, Q = F(ci; 1, n - 2)(s_X^2 s_Y^2 - s_XY^2)/(n - 2),
    D = sqrt((s_Y^2 - s_X^2)^2 + 4 s_XY^2); limits tan(theta -/+ arcsin(2 sqrt(Q)/D)/2);
    when an angle limit passes +/-90 degrees the interval runs through vertical and is
    reported with low > high (and a note); unbounded (NaN, with a note) when
    2 sqrt(Q)/D >= 1. Both are exactly the slopes the sign- and axis-aware F test of
    :func:`model2_test` does not reject. Intercept a = Ybar - b Xbar with CI
    a -/+ t(n - 2) sqrt(s_rho^2/n + Xbar^2 Var b); Var b = b^2 (1 - r^2)/(n - 2) (SMA) or
    (1 + b^2)^2 l1 l2 / ((n - 2)(l1 - l2)^2) (MA; delta method on the angle, l1 > l2 the
    covariance eigenvalues).
    """
    from scipy import stats

    n = len(X)
    ci_note = None
    xm, ym, sxx, syy, sxy = _moments(X, Y)
    r = max(-1.0, min(1.0, sxy / math.sqrt(sxx * syy)))  # rounding can push |r| past 1 on a perfect line
    b = float(slope_from_moments(method, sxx, syy, sxy))
    fq = stats.f.ppf(ci, 1, n - 2)
    if method == "sma":
        B = fq * (1 - r * r) / (n - 2)
        lims = sorted((b * (math.sqrt(B + 1) - math.sqrt(B)), b * (math.sqrt(B + 1) + math.sqrt(B))))
        var_b = b * b * (1 - r * r) / (n - 2)
    else:
        theta = math.atan(b)
        Q = max(0.0, fq * (sxx * syy - sxy * sxy) / (n - 2))
        D = math.sqrt((syy - sxx) ** 2 + 4 * sxy * sxy)
        ratio = 2 * math.sqrt(Q) / D if D > 0 else math.inf
        if ratio >= 1:
            lims = [_NAN, _NAN]
            ci_note = ("MA slope interval unbounded: at this level every direction is consistent with the "
                       "data (the major axis is not determined); reported as missing")
        else:
            half = 0.5 * math.asin(ratio)
            lo_t, hi_t = theta - half, theta + half
            lims = [math.tan(lo_t), math.tan(hi_t)]
            if lo_t <= -math.pi / 2 or hi_t >= math.pi / 2:
                ci_note = (f"MA slope interval passes through vertical: slopes from {_f(lims[0])} up to +infinity "
                           f"and from -infinity up to {_f(lims[1])} (reported low > high)")
        l1, l2 = 0.5 * (sxx + syy + D), max(0.0, 0.5 * (sxx + syy - D))
        var_b = (1 + b * b) ** 2 * l1 * l2 / ((n - 2) * (l1 - l2) ** 2) if l1 > l2 else math.inf
    a = float(ym - b * xm)
    s_rho2 = float(np.var(Y - b * X, ddof=1))
    half_a = stats.t.ppf(0.5 + ci / 2, n - 2) * math.sqrt(s_rho2 / n + xm * xm * var_b)
    test = None
    if test_slope is not None:
        F, p = model2_test(X, Y, test_slope, method)
        test = {"value": float(test_slope), "statistic": F, "p": p}
    note = "SMA slope is meaningless when x and y are uncorrelated; test r first" if method == "sma" and abs(r) < 0.3 else None
    if ci_note:
        note = f"{note}; {ci_note}" if note else ci_note
    return _Core(b, (float(lims[0]), float(lims[1])), a, (float(a - half_a), float(a + half_a)), float(r * r), test, a + b * X, note=note)


def huber_line(X: np.ndarray, Y: np.ndarray, ci: float = 0.95, test_slope: float | None = None, c: float = HUBER_C) -> _Core:
    """Huber M-estimate (statsmodels RLM, MAD scale) with normal-theory CIs and weights.

    psi(u) = clip(u, -c, c); IRLS weights min(1, c/|u|). The test of slope = b0
    is the Wald z test with RLM's standard error.
    """
    import statsmodels.api as sm
    from scipy import stats

    exog = sm.add_constant(X, has_constant="add")
    res = sm.RLM(Y, exog, M=sm.robust.norms.HuberT(t=c)).fit()
    a, b = (float(v) for v in res.params)
    lo, hi = np.asarray(res.conf_int(alpha=1 - ci)).T
    w = np.broadcast_to(np.asarray(res.weights, dtype=float), np.shape(Y)).copy()  # a scalar after a perfect fit
    yw = np.sum(w * Y) / np.sum(w)
    fitted = a + b * X
    r2 = 1 - np.sum(w * (Y - fitted) ** 2) / np.sum(w * (Y - yw) ** 2)
    test = None
    if test_slope is not None:
        z = (b - test_slope) / res.bse[1]
        test = {"value": float(test_slope), "statistic": float(z), "p": float(2 * stats.norm.sf(abs(z)))}
    return _Core(b, (float(lo[1]), float(hi[1])), a, (float(lo[0]), float(hi[0])), float(r2), test, fitted, weights=w)


@dataclass(frozen=True)
class LTSLine:
    """Raw least-trimmed-squares line and its scale.

    Attributes
    ----------
    intercept, slope : float
    h : int
        Points in the trimmed sum.
    objective : float
        Sum of the h smallest squared residuals.
    scale : float
        sqrt(objective/h) made consistent at the normal.
    subset : numpy.ndarray of bool
        The h points of the optimum.
    """

    intercept: float
    slope: float
    h: int
    objective: float
    scale: float
    subset: np.ndarray


def lts_fit(X: np.ndarray, Y: np.ndarray, h: int | None = None, *, max_starts: int = 3000, seed: int = 20240601, max_steps: int = 100) -> LTSLine:
    """Least trimmed squares line by concentration steps (Rousseeuw & Van Driessen 2006).

    Starts from every line through two points when there are at most
    ``max_starts`` such pairs, else from ``max_starts`` random pairs
    (``numpy.random.default_rng(seed)``); each start is refined by C-steps
    (OLS on its h smallest squared residuals) until the subset no longer
    changes; all starts are iterated together as arrays.

    Notes
    -----
    Minimises sum_{i <= h} r^2_(i), h = floor((n + p + 1)/2), p = 2 (Rousseeuw 1984).
    Scale: s = sqrt(objective/h) / sqrt(1 - 2 c phi(c)/q), q = h/n, c = Phi^-1((1 + q)/2),
    the variance of a standard normal truncated to its central fraction q.
    """
    from scipy import stats

    n = len(X)
    h = int(h or (n + 3) // 2)
    n_pairs = n * (n - 1) // 2
    if n_pairs <= max_starts:
        i, j = np.triu_indices(n, 1)
    else:
        rng = np.random.default_rng(seed)
        i = rng.integers(0, n, max_starts)
        j = (i + rng.integers(1, n, max_starts)) % n
    keep = X[i] != X[j]
    i, j = i[keep], j[keep]
    b = (Y[j] - Y[i]) / (X[j] - X[i])
    a = Y[i] - b * X[i]
    prev = None
    for _ in range(max_steps):
        r2 = (Y[None, :] - a[:, None] - b[:, None] * X[None, :]) ** 2
        idx = np.sort(np.argpartition(r2, h - 1, axis=1)[:, :h], axis=1)
        if prev is not None and np.array_equal(idx, prev):
            break
        prev = idx
        xs, ys = X[idx], Y[idx]
        xm, ym = xs.mean(axis=1), ys.mean(axis=1)
        sxx = ((xs - xm[:, None]) ** 2).sum(axis=1)
        sxy = ((xs - xm[:, None]) * (ys - ym[:, None])).sum(axis=1)
        ok = sxx > 0
        b = np.where(ok, sxy / np.where(ok, sxx, 1.0), b)
        a = np.where(ok, ym - b * xm, a)
    r2 = (Y[None, :] - a[:, None] - b[:, None] * X[None, :]) ** 2
    obj = np.partition(r2, h - 1, axis=1)[:, :h].sum(axis=1)
    k = int(np.argmin(obj))
    q = h / n
    c = stats.norm.ppf((1 + q) / 2)
    factor = math.sqrt(1 - 2 * c * stats.norm.pdf(c) / q) if q < 1 else 1.0
    scale = math.sqrt(obj[k] / h) / factor
    subset = np.zeros(n, dtype=bool)
    subset[np.argpartition(r2[k], h - 1)[:h]] = True
    return LTSLine(float(a[k]), float(b[k]), h, float(obj[k]), float(scale), subset)


def lts_line(X: np.ndarray, Y: np.ndarray, ci: float = 0.95, test_slope: float | None = None, seed: int = 20240601) -> _Core:
    """Reweighted LTS: raw LTS, then OLS on the points with |r/s| <= 2.5 (Rousseeuw & Leroy 1987).

    The reported line, CIs and test are those of the reweighted least-squares
    fit; the raw LTS line is kept in the note.
    """
    raw = lts_fit(X, Y, seed=seed)
    std = (Y - raw.intercept - raw.slope * X) / raw.scale if raw.scale > 0 else np.zeros_like(X)
    kept = np.abs(std) <= LTS_CUT
    if kept.sum() < 3 or np.ptp(X[kept]) == 0:
        kept = raw.subset
    core = ols_line(X[kept], Y[kept], ci, test_slope)
    a, b = core.intercept, core.slope
    note = (f"LTS raw line (h = {raw.h}): intercept {raw.intercept:.5g}, slope {raw.slope:.5g}, scale {raw.scale:.4g}; "
            f"reweighted fit on {int(kept.sum())} of {len(X)} points")
    return _Core(b, core.slope_ci, a, core.intercept_ci, core.r2, core.test, a + b * X, weights=kept.astype(float), lts_std=std, note=note)


def _core(method: str, X: np.ndarray, Y: np.ndarray, ci: float, test_slope: float | None, seed: int) -> _Core:
    if method == "ols":
        return ols_line(X, Y, ci, test_slope)
    if method in ("sma", "ma"):
        return model2_line(X, Y, method, ci, test_slope)
    if method == "robust":
        return huber_line(X, Y, ci, test_slope)
    if method == "lts":
        return lts_line(X, Y, ci, test_slope, seed)
    raise UsageError(f"unknown method {method!r}; choose one of {', '.join(METHODS)}")


# --------------------------------------------------------------------------- bootstrap


def _bca(theta_hat: float, boots: np.ndarray, jack: np.ndarray, ci: float) -> tuple[float, float]:
    """BCa interval (Efron 1987) from bootstrap replicates and jackknife values."""
    from scipy import stats

    boots = boots[np.isfinite(boots)]
    if len(boots) == 0:
        return (_NAN, _NAN)
    prop = (np.sum(boots < theta_hat) + 0.5 * np.sum(boots == theta_hat)) / len(boots)
    prop = min(max(prop, 1.0 / (2 * len(boots))), 1 - 1.0 / (2 * len(boots)))
    z0 = stats.norm.ppf(prop)
    d = jack.mean() - jack
    den = 6.0 * (np.sum(d * d)) ** 1.5
    acc = float(np.sum(d**3) / den) if den > 0 else 0.0
    zs = stats.norm.ppf([(1 - ci) / 2, (1 + ci) / 2])
    alphas = stats.norm.cdf(z0 + (z0 + zs) / (1 - acc * (z0 + zs)))
    lo, hi = np.quantile(boots, alphas)
    return (float(lo), float(hi))


def _jackknife_moments(method: str, X: np.ndarray, Y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Leave-one-out slopes and intercepts from running sums (no loop)."""
    n = len(X)
    sx, sy = X.sum() - X, Y.sum() - Y
    sxx, syy, sxy = (X * X).sum() - X * X, (Y * Y).sum() - Y * Y, (X * Y).sum() - X * Y
    m = n - 1
    xm, ym = sx / m, sy / m
    cxx, cyy, cxy = sxx - m * xm * xm, syy - m * ym * ym, sxy - m * xm * ym
    b = slope_from_moments(method, cxx, cyy, cxy)
    return b, ym - b * xm


def _resample_lines(method: str, idx: np.ndarray, xc: np.ndarray, yc: np.ndarray, cross: np.ndarray):
    """Slopes and intercepts (centred scale) of many resamples at once.

    ``idx`` holds one resample per row. Each row's counts of every point come
    from one ``bincount``; the resample sums of x, y, x^2, y^2, xy are then one
    matrix product, counts @ [x, y, x^2, y^2, xy].
    """
    rows, n = idx.shape
    offsets = (n * np.arange(rows, dtype=np.int64))[:, None]
    counts = np.bincount((idx + offsets).ravel(), minlength=rows * n).reshape(rows, n)
    sums = counts @ cross
    xm, ym = sums[:, 0] / n, sums[:, 1] / n
    sxx = (sums[:, 2] - n * xm * xm) / (n - 1)
    syy = (sums[:, 3] - n * ym * ym) / (n - 1)
    sxy = (sums[:, 4] - n * xm * ym) / (n - 1)
    tiny = 1e-12 * max(float(np.mean(cross[:, 2])), 1e-300)
    b = np.where(sxx > tiny, slope_from_moments(method, sxx, syy, sxy), _NAN)
    return b, ym - b * xm


def bootstrap_line(
    method: str,
    X: np.ndarray,
    Y: np.ndarray,
    n_boot: int,
    *,
    ci: float = 0.95,
    seed: int = 20240601,
    progress: bool = False,
    chunk_elems: int = 2_000_000,
) -> dict:
    """Case-resampling bootstrap of slope and intercept: percentile and BCa intervals.

    For ols, sma and ma the resamples are drawn as an index matrix and their
    moments computed with numpy in chunks (no Python loop per resample);
    robust and lts refit each resample. Resamples with all x equal are
    dropped and counted.

    Returns
    -------
    dict
        ``{"resamples", "seed", "dropped", "slope": {"percentile", "bca"},
        "intercept": {...}}``.
    """
    n = len(X)
    rng = np.random.default_rng(seed)
    est = _core(method, X, Y, ci, None, seed)
    slopes = np.empty(n_boot)
    ints = np.empty(n_boot)
    vector = method in ("ols", "sma", "ma")
    # centre on the sample means (shift-invariant slopes; keeps the raw-sum moments accurate)
    x0, y0 = float(X.mean()), float(Y.mean())
    xc, yc = X - x0, Y - y0
    cross = np.column_stack([xc, yc, xc * xc, yc * yc, xc * yc])
    step = max(1, chunk_elems // n) if vector else max(1, n_boot // 50)
    bar = _progress_bar(progress, n_boot)
    with bar as pb:
        task = pb.add_task(f"bootstrap {method}", total=n_boot) if pb else None
        for start in range(0, n_boot, step):
            stop = min(n_boot, start + step)
            idx = rng.integers(0, n, size=(stop - start, n), dtype=np.int32)
            if vector:
                b, a = _resample_lines(method, idx, xc, yc, cross)
                slopes[start:stop], ints[start:stop] = b, a + y0 - b * x0
            else:
                for k, row in enumerate(idx):
                    xb, yb = X[row], Y[row]
                    if np.ptp(xb) == 0 or len(np.unique(xb)) < 3:
                        slopes[start + k] = ints[start + k] = _NAN
                        continue
                    c = _core(method, xb, yb, ci, None, seed)
                    slopes[start + k], ints[start + k] = c.slope, c.intercept
            if pb:
                pb.update(task, completed=stop)
    if vector:
        jb, ja = _jackknife_moments(method, X, Y)
    else:
        jb, ja = np.empty(n), np.empty(n)
        for i in range(n):
            m = np.arange(n) != i
            c = _core(method, X[m], Y[m], ci, None, seed)
            jb[i], ja[i] = c.slope, c.intercept
    ok = np.isfinite(slopes)
    lo_q, hi_q = (1 - ci) / 2, (1 + ci) / 2
    out: dict = {"resamples": int(n_boot), "seed": int(seed), "dropped": int((~ok).sum())}
    for name, reps, jack, hat in (("slope", slopes[ok], jb, est.slope), ("intercept", ints[ok], ja, est.intercept)):
        per = np.quantile(reps, [lo_q, hi_q]) if len(reps) else [_NAN, _NAN]
        out[name] = {"percentile": [float(per[0]), float(per[1])], "bca": list(_bca(hat, reps, jack, ci))}
    return out


class _NoBar:
    def __enter__(self):
        return None

    def __exit__(self, *exc):
        return False


def _progress_bar(progress: bool, total: int):
    if not progress:
        return _NoBar()
    from rich.console import Console
    from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn

    return Progress(TextColumn("{task.description}"), BarColumn(), TextColumn("{task.completed}/{task.total}"),
                    TimeRemainingColumn(), console=Console(stderr=True), transient=True)


# --------------------------------------------------------------------------- groups


def _lr_terms(b: float, groups: list[tuple[np.ndarray, np.ndarray]], method: str) -> float:
    """Sum over groups of -n_i ln(1 - r_i(b)^2), the LR statistic for slope b in every group."""
    total = 0.0
    for X, Y in groups:
        rho = Y - b * X
        f = Y + b * X if method == "sma" else X + b * Y
        r = np.corrcoef(rho, f)[0, 1]
        total += -len(X) * math.log(max(1 - r * r, 1e-300))
    return total


def common_slope_model2(groups: list[tuple[np.ndarray, np.ndarray]], method: str, ci: float = 0.95, *, with_ci: bool = True) -> dict:
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
        _, _, sxx, syy, sxy = _moments(X, Y)
        slopes.append(float(slope_from_moments(method, sxx, syy, sxy)))
    slopes_arr = np.array(slopes)
    sign = np.sign(np.median(slopes_arr)) or 1.0
    same = slopes_arr[np.sign(slopes_arr) == sign]
    lo_b, hi_b = float(same.min()), float(same.max())
    if hi_b - lo_b < 1e-12:
        b_c = lo_b
    else:
        res = optimize.minimize_scalar(lambda b: _lr_terms(b, groups, method), bounds=(lo_b, hi_b), method="bounded",
                                       options={"xatol": 1e-10})
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
            return _NAN
        if excess(far) <= 0:
            return _NAN
        return float(optimize.brentq(excess, min(b_c, far), max(b_c, far), xtol=1e-10))

    return {
        "slope": b_c,
        "slope_ci": [root(-1.0), root(1.0)] if with_ci else None,
        "test": "LR chi2",
        "statistic": float(T),
        "df": g - 1,
        "p": float(stats.chi2.sf(T, g - 1)),
    }


def _wald_means(values: list[np.ndarray], deriv: np.ndarray | None = None, var_b: float = 0.0) -> dict:
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
    return {"test": "Wald chi2", "statistic": W, "df": g - 1, "p": float(stats.chi2.sf(W, g - 1)), "means": [float(v) for v in m]}


def _common_slope_variance(b: float, groups: list[tuple[np.ndarray, np.ndarray]], method: str) -> float:
    """Var(b_c) from the curvature of the LR profile: 2 / T''(b_c) (central difference)."""
    h = 1e-4 * max(1.0, abs(b))
    d2 = (_lr_terms(b + h, groups, method) - 2 * _lr_terms(b, groups, method) + _lr_terms(b - h, groups, method)) / (h * h)
    return 2.0 / d2 if d2 > 0 else math.inf


def _group_tests_ols(X: np.ndarray, Y: np.ndarray, codes: np.ndarray, g: int, ci: float) -> dict:
    """OLS: interaction F test of equal slopes, common slope (parallel lines), F test of elevation."""
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
        "common_slope": {"slope": float(r1.params[1]), "slope_ci": [float(lo), float(hi)], "test": "F (interaction)",
                         "statistic": float(F), "df": [int(df), int(r2.df_resid)], "p": float(p)},
        "elevation": {"test": "F", "statistic": float(Fe), "df": [int(dfe), int(r1.df_resid)], "p": float(pe), "means": elev},
        "shift": None,
    }


def group_fits(X: np.ndarray, Y: np.ndarray, groups: np.ndarray, method: str, ci: float, test_slope: float | None, seed: int) -> tuple[list[dict], dict | None, list[str]]:
    """Per-group fits and, for ols/sma/ma, the common-slope, elevation and shift tests."""
    names = list(dict.fromkeys(groups.tolist()))
    rows, usable, notes = [], [], []
    for name in names:
        m = groups == name
        row: dict = {"group": name, "n": int(m.sum())}
        if m.sum() < 3 or np.ptp(X[m]) == 0:
            row.update(slope=None, slope_ci=None, intercept=None, intercept_ci=None, r2=None, test_slope=None)
            notes.append(f"group {name!r} has fewer than 3 distinct x values: no per-group line, left out of group tests")
        else:
            c = _core(method, X[m], Y[m], ci, test_slope, seed)
            row.update(slope=c.slope, slope_ci=list(c.slope_ci), intercept=c.intercept, intercept_ci=list(c.intercept_ci),
                       r2=c.r2, test_slope=c.test)
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
            elev = _wald_means([Yp - b * Xp for Xp, Yp in parts], np.array([-Xp.mean() for Xp, _ in parts]), var_b)
            if method == "sma":
                shift = _wald_means([Yp + b * Xp for Xp, Yp in parts], np.array([Xp.mean() for Xp, _ in parts]), var_b)
            else:
                shift = _wald_means([Xp + b * Yp for Xp, Yp in parts], np.array([Yp.mean() for _, Yp in parts]), var_b)
            tests = {"common_slope": cs, "elevation": elev, "shift": shift}
        tests["groups"] = usable
    elif len(usable) >= 2:
        notes.append(f"common-slope tests are available for ols, sma and ma, not {method}")
    return rows, tests, notes


# --------------------------------------------------------------------------- breakpoint


def segmented_line(X: np.ndarray, Y: np.ndarray, ci: float = 0.95, psi0: float | None = None, n_grid: int = 10) -> dict:
    """Broken-line fit Y = b0 + b1 X + b2 (X - psi)_+ (Muggeo 2003) with Davies' test.

    The breakpoint is the global least-squares optimum over the interior data
    range (between the 3rd smallest and 3rd largest x), found by
    :func:`_global_breakpoint`: the profile RSS is smooth between consecutive
    data values, so each such interval is minimised by bounded Brent search and
    the best of these (and of a 200-point grid, and of ``psi0`` if given) wins.
    Muggeo's iteration is not used to locate it: it can cycle (period 3 seen in
    simulation) and stop above the optimum.

    Notes
    -----
    At the optimum, Muggeo's (2003) linearisation, OLS on [1, X, U, V] with
    U = (X - psi)_+ and V = -I(X > psi), gives se(psi) = se(gamma)/|b2| and the CI
    psi -/+ t(ci; n - 4) se(psi). Slopes
    b1 (left) and b1 + b2 (right) with t(n - 4) CIs from the same fit.
    Davies (1987) test of b2 = 0 with psi absent under H0: S_k = Wald t of b2 at ``n_grid``
    points evenly spread over the interior range; M = max |S_k|, V = sum |S_k - S_(k-1)|,
    two-sided p ~ 2 [Phi(-M) + V exp(-M^2/2)/sqrt(8 pi)] (an upper bound, capped at 1).
    """
    import statsmodels.api as sm
    from scipy import stats

    n = len(X)
    xs = np.sort(X)
    lo_b, hi_b = xs[2], xs[-3]
    if not hi_b > lo_b:
        raise UsageError("a breakpoint needs at least 3 distinct x values on each side; too few points")

    def rss(psi: float) -> float:
        d = np.column_stack([np.ones(n), X, np.clip(X - psi, 0, None)])
        return float(np.linalg.lstsq(d, Y, rcond=None)[1].sum()) if n > 3 else 0.0

    psi = _global_breakpoint(rss, X, lo_b, hi_b, psi0)
    U = np.clip(X - psi, 0, None)
    V = -(X > psi).astype(float)
    res = sm.OLS(Y, np.column_stack([np.ones(n), X, U, V])).fit()  # Muggeo's linearisation at the optimum
    cov = np.asarray(res.cov_params())
    b1, b2 = res.params[1], res.params[2]
    se_psi = float(res.bse[3] / abs(b2)) if b2 != 0 else _NAN
    tq = stats.t.ppf(0.5 + ci / 2, n - 4)
    se_right = math.sqrt(cov[1, 1] + cov[2, 2] + 2 * cov[1, 2])
    # Davies' test
    S = []
    for g in np.linspace(lo_b, hi_b, n_grid + 2)[1:-1]:
        r = sm.OLS(Y, np.column_stack([np.ones(n), X, np.clip(X - g, 0, None)])).fit()
        S.append(r.tvalues[2])
    S = np.asarray(S)
    M = float(np.max(np.abs(S)))
    Vt = float(np.sum(np.abs(np.diff(S))))
    p = min(1.0, 2 * (stats.norm.sf(M) + Vt * math.exp(-M * M / 2) / math.sqrt(8 * math.pi)))
    fit_final = sm.OLS(Y, np.column_stack([np.ones(n), X, np.clip(X - psi, 0, None)])).fit()
    return {
        "x_log": float(psi),
        "x_log_ci": [float(psi - tq * se_psi), float(psi + tq * se_psi)],
        "se_x_log": se_psi,
        "slope_left": float(b1),
        "slope_left_ci": [float(b1 - tq * res.bse[1]), float(b1 + tq * res.bse[1])],
        "slope_right": float(b1 + b2),
        "slope_right_ci": [float(b1 + b2 - tq * se_right), float(b1 + b2 + tq * se_right)],
        "intercept": float(fit_final.params[0]),
        "rss": float(fit_final.ssr),
        "p_single_line": float(p),
        "davies_max_abs_t": M,
    }


def _global_breakpoint(rss: Callable[[float], float], X: np.ndarray, lo: float, hi: float,
                       psi0: float | None = None, max_intervals: int = 400) -> float:
    """The psi in [lo, hi] minimising the profile RSS of a broken line (fitted scale).

    Between consecutive distinct data values the profile RSS is a smooth function of
    psi; each interval is minimised by bounded Brent search (scipy ``minimize_scalar``).
    With more than ``max_intervals`` intervals, a 400-point grid is refined around its
    8 best points instead. The result is never worse than any grid point or ``psi0``.
    """
    from scipy.optimize import minimize_scalar

    grid = np.linspace(lo, hi, 200)
    inner = np.unique(X[(X > lo) & (X < hi)])
    edges = np.unique(np.concatenate([[lo, hi], inner]))
    if len(edges) - 1 > max_intervals:
        fine = np.linspace(lo, hi, 401)
        vals = np.array([rss(g) for g in fine])
        keep = np.argsort(vals)[:8]
        spans = [(fine[max(k - 1, 0)], fine[min(k + 1, len(fine) - 1)]) for k in keep]
    else:
        spans = list(zip(edges[:-1], edges[1:], strict=True))
    cands = [float(g) for g in grid] + [float(e) for e in edges]
    if psi0 is not None and lo <= psi0 <= hi:
        cands.append(float(psi0))
    tol = 1e-10 * max(1.0, hi - lo)
    for a, b in spans:
        if b - a <= tol:
            continue
        opt = minimize_scalar(rss, bounds=(a, b), method="bounded", options={"xatol": tol})
        cands.append(float(opt.x))
    vals = [rss(c) for c in cands]
    return cands[int(np.argmin(vals))]


# --------------------------------------------------------------------------- table handling


def _transform(log: str):
    if log == "10":
        return np.log10
    if log == "e":
        return np.log
    return lambda v: np.asarray(v, dtype=float)


def _inverse(log: str):
    if log == "10":
        return lambda v: 10.0**v
    if log == "e":
        return np.exp
    return lambda v: v


def _prepare(table: pd.DataFrame, x: str, y: str, log: str, taxon_col: str, by: str | None):
    """Numeric fitted-scale arrays, labels, groups and the excluded rows with reasons."""
    import pandas as pd

    for col, what in ((x, "x"), (y, "y")) + (((by, "by"),) if by else ()):
        if col not in table.columns:
            shown = ", ".join(map(str, list(table.columns)[:20]))
            raise UsageError(f"{what} column {col!r} is not in the table; columns are: {shown}")
    if taxon_col in table.columns:
        labels = table[taxon_col].astype(str).tolist()
    else:
        labels = [f"row {i + 2}" for i in range(len(table))]
    values = {}
    for col in (x, y):
        raw = table[col]
        num = pd.to_numeric(raw, errors="coerce")
        if num.notna().sum() == 0 and raw.notna().sum() > 0:
            raise UsageError(f"column {col!r} is not numeric (e.g. {raw.dropna().iloc[0]!r})")
        values[col] = (raw, num.to_numpy(dtype=float))
    excluded, keep = [], []
    for i, lab in enumerate(labels):
        reasons = []
        for col in (x, y):
            raw, num = values[col]
            v = num[i]
            if pd.isna(raw.iloc[i]):
                reasons.append(f"missing {col}")
            elif not np.isfinite(v):
                reasons.append(f"{col} value {raw.iloc[i]!r} is not a number")
            elif log != "none" and v <= 0:
                reasons.append(f"{col} = {v:g} is not positive (log{'10' if log == '10' else ''} transform)")
        if by and pd.isna(table[by].iloc[i]):
            reasons.append(f"missing group ({by})")
        if reasons:
            excluded.append({"label": lab, "reason": "; ".join(reasons)})
        else:
            keep.append(i)
    keep_arr = np.asarray(keep, dtype=int)
    tf = _transform(log)
    X = tf(values[x][1][keep_arr])
    Y = tf(values[y][1][keep_arr])
    labs = [labels[i] for i in keep]
    groups = table[by].iloc[keep_arr].astype(str).to_numpy() if by else None
    return X, Y, labs, groups, excluded, keep_arr


def fit(
    table: pd.DataFrame,
    x: str,
    y: str,
    method: str = "sma",
    *,
    by: str | None = None,
    test_slope: float | None = None,
    ci: float = 0.95,
    log: str = "10",
    bootstrap: int = 0,
    seed: int = 20240601,
    taxon_col: str = "taxon",
    breakpoint: bool = False,
    progress: bool = False,
    drop_flagged: bool | str | list[str] | None = None,
    **pgls_options: Any,
) -> FitResult:
    """Fit the scaling line log y = alpha + beta log x.

    Parameters
    ----------
    table : pandas.DataFrame
        One row per taxon.
    x, y : str
        Value columns (for a comparo per-taxon table: quantity keys such as
        ``body_mass`` in its canonical unit).
    method : {"ols", "sma", "ma", "robust", "lts", "pgls"}
    by : str, optional
        Grouping column: per-group fits and tests for a common slope, equal
        elevation and no shift along the common axis.
    test_slope : float, optional
        Hypothesised exponent to test against (e.g. 1 for isometry).
    ci : float
        Confidence level, in (0, 1).
    log : {"10", "e", "none"}
        Transform of both axes.
    bootstrap : int
        Resamples for percentile and BCa CIs (0: none).
    seed : int
        Seed of ``numpy.random.default_rng`` (bootstrap, LTS random starts).
    taxon_col : str
        Label column.
    breakpoint : bool
        Also fit a broken line (least squares, Muggeo 2003) with Davies' test.
    progress : bool
        Show a progress bar on standard error for a long bootstrap.
    drop_flagged : bool, str or list of str, optional
        Also refit without the points flagged by these rules and report the
        refit in ``refit_without_flagged`` beside the original (which is
        unchanged). ``True`` means the misfit rules (``bonferroni``,
        ``robust_weight``, ``lts_residual``); a comma list or list may name
        rules and groups (:func:`comparo.flags.drop_rules`). Default: no refit,
        nothing is ever dropped.
    **pgls_options
        Passed to :func:`comparo.phylo.pgls_fit` (tree, lambda, REML...).

    Returns
    -------
    FitResult

    Raises
    ------
    UsageError
        Unknown column or method, non-numeric column, bad option value, fewer
        than 3 usable points, or all x identical.

    Examples
    --------
    >>> import pandas as pd
    >>> t = pd.DataFrame({"taxon": list("abcd"), "m": [1, 10, 100, 1000], "f": [2, 4.1, 7.9, 16.2]})
    >>> r = fit(t, "m", "f", method="ols")
    >>> round(r.slope, 3)
    0.301
    """
    from comparo.bounds import check_finite, check_seed

    seed = check_seed(seed)
    test_slope = check_finite(test_slope, "the slope to test against")
    if method not in METHODS:
        raise UsageError(f"unknown method {method!r}; choose one of {', '.join(METHODS)}")
    log = str(log)
    if log not in LOGS:
        raise UsageError(f"--log must be one of 10, e, none (got {log!r})")
    if not 0 < ci < 1:
        raise UsageError(f"--ci must lie strictly between 0 and 1 (got {ci})")
    if bootstrap < 0:
        raise UsageError(f"--bootstrap must be 0 or a positive number of resamples (got {bootstrap})")
    if method == "pgls":
        from comparo.phylo import pgls_fit

        if bootstrap or breakpoint:
            raise UsageError("--bootstrap and --breakpoint are not available for method pgls")
        if by is not None:
            pgls_options["by"] = by
        d = pgls_fit(table=table, x=x, y=y, log=log, ci=ci, test_slope=test_slope, taxon_col=taxon_col, **pgls_options)
        res = FitResult.from_dict(d)
        if drop_flagged:
            from dataclasses import replace

            from comparo.flags import drop_rules

            res = replace(res, refit_without_flagged=FlaggedRefit(
                drop_rules(drop_flagged), (), None,
                note="pgls fits carry no outlier or influence flags here; nothing was dropped and no refit was made"))
        return res
    if pgls_options:
        raise UsageError(f"options {', '.join(sorted(pgls_options))} apply only to method pgls")

    from comparo.flags import drop_rules, flag_points

    rules = drop_rules(drop_flagged)
    X, Y, labels, groups, excluded, rows_used = _prepare(table, x, y, log, taxon_col, by)
    n = len(X)
    from comparo.bounds import check_bootstrap

    bootstrap = check_bootstrap(bootstrap, n, method)
    if n < 3:
        raise UsageError(f"{method} needs at least 3 usable points; {n} remain after excluding {len(excluded)} row(s)"
                         + (f" ({excluded[0]['label']}: {excluded[0]['reason']}, ...)" if excluded else ""))
    if np.ptp(X) == 0:
        raise UsageError(f"all usable x values ({x}) are identical: no slope can be fitted")
    if method in ("sma", "ma") and np.ptp(Y) == 0:
        raise UsageError(f"all usable y values ({y}) are identical: the {method.upper()} slope is undefined")
    if method == "lts" and n < 5:
        raise UsageError(f"lts needs at least 5 usable points; {n} remain")

    core = _core(method, X, Y, ci, test_slope, seed)
    notes = [core.note] if core.note else []
    flags = flag_points(X, Y, labels, weights=core.weights if method == "robust" else None,
                        lts_std=core.lts_std if method == "lts" else None)
    group_rows = group_tests = None
    if by:
        group_rows, group_tests, gnotes = group_fits(X, Y, groups, method, ci, test_slope, seed)
        notes += gnotes
    bp = None
    if breakpoint:
        if n < 8:
            raise UsageError(f"a breakpoint fit needs at least 8 usable points; {n} remain")
        bp = segmented_line(X, Y, ci)
        inv = _inverse(log)
        bp = {"x_log": bp["x_log"], "x": float(inv(bp["x_log"])), "x_ci": [float(inv(v)) for v in bp["x_log_ci"]],
              **{k: v for k, v in bp.items() if k not in ("x_log",)}}
    boot = None
    if bootstrap:
        boot = bootstrap_line(method, X, Y, bootstrap, ci=ci, seed=seed, progress=progress and bootstrap * n >= 200_000)
    points = []
    for i, lab in enumerate(labels):
        rec = {"label": lab, "x_fit": float(X[i]), "y_fit": float(Y[i]), "fitted": float(core.fitted[i]),
               "residual": float(Y[i] - core.fitted[i])}
        if by:
            rec["group"] = groups[i]
        if core.weights is not None:
            rec["weight"] = float(core.weights[i])
        if core.lts_std is not None:
            rec["lts_std"] = float(core.lts_std[i])
        points.append(rec)
    refit = None
    if drop_flagged:
        refit = _refit_without_flagged(
            table, flags.flags, rules, rows_used, core.slope,
            dict(x=x, y=y, method=method, by=by, test_slope=test_slope, ci=ci, log=log, bootstrap=bootstrap, seed=seed,
                 taxon_col=taxon_col, breakpoint=breakpoint, progress=progress))
    return FitResult(
        method=method, x=x, y=y, log=log, n=n, slope=core.slope, slope_ci=core.slope_ci, intercept=core.intercept,
        intercept_ci=core.intercept_ci, r2=core.r2, ci_level=float(ci), test_slope=core.test,
        groups=group_rows, group_tests=group_tests, outliers=[f.to_dict() for f in flags.flags], excluded=excluded,
        breakpoint=bp, bootstrap=boot, points=tuple(points), notes=tuple(notes), refit_without_flagged=refit,
    )


def _refit_without_flagged(table, flags, rules: tuple[str, ...], rows_used: np.ndarray, slope: float, kw: dict) -> FlaggedRefit:
    """Drop the rows of the points flagged by *rules* and fit again with the same options."""
    per_point: dict[int, dict] = {}
    for f in flags:
        if f.rule in rules:
            d = per_point.setdefault(f.index, {"label": f.label, "rules": [], "reasons": []})
            if f.rule not in d["rules"]:
                d["rules"].append(f.rule)
            d["reasons"].append(f.reason)
    dropped = tuple(per_point[i] for i in sorted(per_point))
    if not dropped:
        return FlaggedRefit(rules, (), None, None, note="no point breaks the chosen rules; nothing was dropped")
    pos = rows_used[sorted(per_point)]
    sub = table.drop(index=table.index[pos])
    try:
        r = fit(sub, **kw)
    except UsageError as exc:
        return FlaggedRefit(rules, dropped, None, None, note=f"no refit: {exc}")
    return FlaggedRefit(rules, dropped, r, r.slope - slope)
