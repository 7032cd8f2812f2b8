"""Multiple regression of log y on several log predictors (and a factor), by OLS or by PGLS,
with maximum-likelihood log-likelihoods and AICc for model comparison.

PGLS uses the project's linear-time engine and lambda search (:mod:`comparo.phylo.likelihood`),
whose design matrix may have any number of columns; nothing here builds an n x n matrix.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.errors import UsageError
from comparo.base.jsonsafe import finite_or_none as _f
from comparo.base.numbers import number
from comparo.base.results import Result
from comparo.base.scales import LOG_SCALES, to_scale

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

#: Methods that compare models with several predictors (a maximum likelihood each).
MULTIPLE_METHODS = ("ols", "pgls")
#: Methods that fit several predictors; model II lines (sma, ma) are for one predictor, and
#: robust (Huber) has no likelihood, so it fits but does not enter a model comparison.
FIT_METHODS = ("ols", "robust", "pgls")
_WEIGHT_CUT = 0.5  # low Huber weight, as the flags of a one-predictor robust line (common practice)
#: Columns that enter a multiple regression untransformed unless asked otherwise: temperature in
#: degrees Celsius is an interval scale (its zero is arbitrary and values may be <= 0), so a ratio
#: of two temperatures, and hence its logarithm, means nothing.
LINEAR_BY_DEFAULT = ("temperature_c",)
_SCALE = {"10": "log10", "e": "ln", "none": "linear"}


def linear_predictors(
    predictors: Sequence[str], linear: Sequence[str] | None = None, y: str | None = None
) -> tuple[str, ...]:
    """The predictors that enter untransformed: those of :data:`LINEAR_BY_DEFAULT` and those
    named in *linear* (which must be predictors, and not y)."""
    linear = list(linear or ())
    if y is not None and y in linear:
        raise UsageError(
            f"--x-linear {y!r}: y is always on the --log scale; only predictors enter linearly"
        )
    bad = [c for c in linear if c not in predictors]
    if bad:
        raise UsageError(
            f"--x-linear {', '.join(map(repr, bad))}: not a predictor of the model "
            f"(predictors: {', '.join(predictors) or 'none'})"
        )
    return tuple(c for c in predictors if c in linear or c in LINEAR_BY_DEFAULT)


def aicc(loglik: float, k: int, n: int) -> float:
    """AICc = -2 lnL + 2k + 2k(k+1)/(n-k-1) (Hurvich & Tsai 1989; Burnham & Anderson 2002);
    NaN when n - k - 1 <= 0."""
    if n - k - 1 <= 0:
        return math.nan
    return -2.0 * loglik + 2.0 * k + 2.0 * k * (k + 1) / (n - k - 1)


@dataclass(frozen=True)
class MultipleFit(Result):
    """One fitted model y ~ predictors (+ factor) on the fitted (log) scale.

    ``terms`` rows: term (``intercept``, a predictor name, ``COLUMN[level]``), estimate,
    se, ci [lo, hi], t, p (two-sided, t with n - p df). ``loglik`` is the maximum
    likelihood (not REML), ``k`` counts the coefficients, the residual variance and,
    when estimated, lambda.
    """

    method: str
    y: str
    predictors: tuple[str, ...]
    factor: str | None
    reference: str | None
    log: str
    n: int
    terms: tuple[dict, ...]
    loglik: float
    k: int
    aicc: float
    ci_level: float
    lambda_: float | None = None
    lambda_ci: tuple[float, float] | None = None
    lambda_estimated: bool = False
    rss: float = math.nan
    excluded: tuple[dict, ...] = field(default_factory=tuple)
    against: dict | None = None
    outliers: tuple[dict, ...] = field(default_factory=tuple)
    flags_note: str | None = None
    sensitivity: dict | None = None  # leave one source out (comparo.fitting.multiple_sensitivity)
    linear: tuple[str, ...] = ()  # predictors entered untransformed (temperature in degC)
    resampling: dict | None = None  # bootstrap (comparo.fitting.multiple_resampling)
    by: dict | None = None  # fits within each group (comparo.fitting.multiple_groups)

    def scale(self, term: str) -> str | None:
        """The scale a predictor entered on (``log10``, ``ln`` or ``linear``); None for the
        intercept and factor levels."""
        if term not in self.predictors:
            return None
        return "linear" if term in self.linear else _SCALE[self.log]

    def to_dict(self) -> dict:
        return {
            "method": self.method,
            "y": self.y,
            "x": list(self.predictors),
            "predictors": list(self.predictors),
            "factor": self.factor,
            "reference_level": self.reference,
            "log": self.log,
            "n": self.n,
            "terms": [{**t, "scale": self.scale(t["term"])} for t in self.terms],
            "loglik": _f(self.loglik),
            "aicc": _f(self.aicc),
            "k": self.k,
            "ci_level": self.ci_level,
            "lambda": _f(self.lambda_),
            "lambda_ci": None if self.lambda_ci is None else [_f(v) for v in self.lambda_ci],
            "against": None if self.against is None else dict(self.against),
            "likelihood": None if self.method == "robust" else "ML",
            "outliers": [dict(o) for o in self.outliers],
            "flags_note": self.flags_note,
            "excluded": [dict(e) for e in self.excluded],
            "sensitivity": self.sensitivity,
            "linear": list(self.linear),
            **({} if self.resampling is None else {"resampling": self.resampling}),
            **({} if self.by is None else {"by": self.by}),
        }

    def to_frame(self):
        """The terms: ``term``, ``estimate``, ``se``, ``ci_low``, ``ci_high``, ``t``, ``p``."""
        import pandas as pd

        cols = ["term", "estimate", "se", "ci_low", "ci_high", "t", "p"]
        rows = [
            {**{k: t.get(k) for k in cols}, "ci_low": t["ci"][0], "ci_high": t["ci"][1]}
            for t in self.terms
        ]
        return pd.DataFrame(rows, columns=cols)

    def summary(self) -> str:
        """The fit as text: terms, log-likelihood, AICc, lambda and the joint test."""
        shown = [f"{p} (linear)" if p in self.linear else p for p in self.predictors]
        model = " + ".join(shown + ([self.factor] if self.factor else [])) or "1"
        head = f"{self.method.upper()} multiple regression, log {self.log}: {self.y} ~ {model}"
        lines = [
            head,
            f"n = {self.n} taxa"
            + (f" ({len(self.excluded)} left out, JSON key 'excluded')" if self.excluded else ""),
        ]
        if self.factor:
            lines.append(
                f"factor {self.factor}: treatment coding, reference level {self.reference!r} "
                f"(each {self.factor}[level] is the difference from it)"
            )
        lvl = f"{100 * self.ci_level:g}% CI"
        w = max(len("term"), *(len(t["term"]) for t in self.terms))
        lines.append(f"{'term':<{w}}  {'estimate':>10}  {'SE':>9}  {lvl:>23}  {'t':>8}  {'p':>9}")
        for t in self.terms:
            ci = f"[{number(t['ci'][0])}, {number(t['ci'][1])}]"
            lines.append(
                f"{t['term']:<{w}}  {number(t['estimate']):>10}  {number(t['se']):>9}  {ci:>23}  "
                f"{number(t['t']):>8}  {number(t['p']):>9}"
            )
        if self.method == "robust":
            lines.append(
                "Huber M-estimate (c = 1.345, MAD scale): t is the Wald z, p and CIs from the "
                "normal; no likelihood, so no AICc"
            )
        else:
            lines.append(
                f"log-likelihood (ML) {self.loglik:.4f}, k = {self.k}, AICc {number(self.aicc)}"
            )
        if self.lambda_ is not None:
            how = "by ML" if self.lambda_estimated else "fixed"
            ci = (
                ""
                if self.lambda_ci is None
                else f" [{self.lambda_ci[0]:.3f}, {self.lambda_ci[1]:.3f}]"
            )
            lines.append(f"Pagel's lambda {how}: {self.lambda_:.3f}{ci}")
        if self.against:
            a = self.against
            vals = ", ".join(f"{k} = {v:g}" for k, v in a["terms"].items())
            dist = (
                f"F({a['df'][0]}, {a['df'][1]})"
                if a["df"][1] is not None
                else f"chi-square({a['df'][0]})"
            )
            lines.append(
                f"joint test of {vals}: {dist} = {number(a['statistic'])}, "
                f"p = {number(a['p'])}" + (f" ({a['note']})" if a.get("note") else "")
            )
        if self.outliers:
            lines.append("flags:")
            lines += [
                f"  {o['label']}: {o['reason']} ({o['statistic']:.5g})" for o in self.outliers
            ]
        if self.flags_note:
            lines.append(self.flags_note)
        return "\n".join(lines)


@dataclass(frozen=True, eq=False)
class Design:
    """The common rows of a table as fitted-scale arrays: y, every numeric column asked for,
    the factor's dummy columns (treatment coding) and the rows left out with reasons."""

    labels: tuple[str, ...]
    y: np.ndarray
    columns: Mapping[str, np.ndarray]
    factor: str | None
    reference: str | None
    dummies: Mapping[str, np.ndarray]
    excluded: tuple[dict, ...]
    tree: Any = None  # FlatTree of the rows (pgls), rows in its tip order
    linear: tuple[str, ...] = ()  # columns kept untransformed

    def matrix(self, predictors: Sequence[str]) -> tuple[np.ndarray, list[str]]:
        """[1 | predictors | dummies] and the term names."""
        n = len(self.y)
        cols = [np.ones(n)] + [self.columns[p] for p in predictors] + list(self.dummies.values())
        return np.column_stack(cols), ["intercept", *predictors, *self.dummies]


def check_options(
    log: Any, ci: float, method: str, n_predictors: int, methods: Sequence[str] = MULTIPLE_METHODS
) -> str:
    """Check the options of a multiple fit (log, ci, method, number of predictors); returns the log
    name."""
    log = "none" if log is None else str(log)
    if log not in LOG_SCALES:
        raise UsageError(f"log must be one of 10, e, none; got {log!r}")
    if not 0.0 < ci < 1.0:
        raise UsageError(f"ci must be in (0, 1), got {ci}")
    if method in ("sma", "ma") and n_predictors > 1:
        raise UsageError(
            f"method {method} (model II) fits a line through one predictor; with {n_predictors} "
            "predictors use --method ols or pgls (errors in y; log x measured with little error "
            "relative to the scatter), or fit one predictor at a time with sma/ma"
        )
    if method == "lts" and n_predictors > 1:
        raise UsageError(
            f"method lts (least trimmed squares) is the one-predictor line; with {n_predictors} "
            "predictors use --method robust (Huber M-estimate, resistant to outliers in y) or "
            "--method ols and read its flags (studentized residuals, leverage, Cook's distance)"
        )
    if method not in methods:
        raise UsageError(
            f"several predictors (or a factor) are fitted by {', '.join(methods)}, not {method!r}"
        )
    return log


def design(
    table: pd.DataFrame,
    y: str,
    columns: Sequence[str],
    *,
    factor: str | None = None,
    log: str = "10",
    taxon_col: str = "taxon",
    tree: Any = None,
    tree_labels: Mapping[str, str] | None = None,
    linear: Sequence[str] = (),
) -> Design:
    """The rows having y, every column of *columns* (positive under a log, unless it is one of
    *linear*, kept untransformed), the factor and, given a *tree*, a tip; each other row is
    listed with all its reasons."""
    import pandas as pd

    needed = [y, *columns] + ([factor] if factor else [])
    missing = [c for c in dict.fromkeys(needed) if c not in table.columns]
    if missing:
        shown = ", ".join(map(str, list(table.columns)[:30]))
        raise UsageError(
            f"{', '.join(repr(c) for c in missing)} not in the table; columns are: {shown}"
        )
    labels = (
        table[taxon_col].astype(str).tolist()
        if taxon_col in table.columns
        else [f"row {i + 2}" for i in range(len(table))]
    )
    numeric = {}
    for c in dict.fromkeys([y, *columns]):
        raw = table[c]
        num = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
        if np.isnan(num).all() and raw.notna().any():
            raise UsageError(f"column {c!r} is not numeric (e.g. {raw.dropna().iloc[0]!r})")
        numeric[c] = num
    tip_of = None
    if tree is not None:
        from comparo.phylo.tips import match_labels
        from comparo.phylo.trees import as_topo

        topo = as_topo(tree)
        tip_of = match_labels(topo, labels, tree_labels).tip_of
    bad = np.zeros(len(labels), dtype=bool)  # rows with any problem, found with numpy first
    logged = {c: log != "none" and c not in linear for c in numeric}
    for c, v in numeric.items():
        bad |= ~np.isfinite(v) | ((v <= 0) if logged[c] else False)
    fac = None
    if factor:
        fac = table[factor]
        bad |= (fac.isna() | (fac.astype(str).str.strip() == "")).to_numpy()
    if tip_of is not None:
        bad |= np.array([lab not in tip_of for lab in labels], dtype=bool)
    excluded = []
    for i in np.flatnonzero(bad):  # the reasons, for the rows left out only
        reasons = []
        for c, v in numeric.items():
            if not math.isfinite(v[i]):
                reasons.append(f"missing {c}")
            elif logged[c] and v[i] <= 0:
                reasons.append(f"{c} = {v[i]:g} is not positive (log transform)")
        if fac is not None and (pd.isna(fac.iloc[i]) or str(fac.iloc[i]).strip() == ""):
            reasons.append(f"missing {factor}")
        if tip_of is not None and labels[i] not in tip_of:
            reasons.append("taxon not in the tree")
        excluded.append({"label": labels[i], "reason": "; ".join(reasons)})
    keep = np.flatnonzero(~bad).tolist()
    ft = None
    if tree is not None and keep:
        from comparo.phylo.regression import pruned_tree

        ft, keep, _ = pruned_tree(topo, keep, [tip_of[labels[i]] for i in keep])
    idx = np.asarray(keep, dtype=int)
    cols = {c: to_scale(numeric[c][idx], log) if logged[c] else numeric[c][idx] for c in numeric}
    reference, dummies = None, {}
    if factor:
        values = table[factor].astype(str).to_numpy()[idx]
        levels = sorted(set(values))
        if levels:
            reference = levels[0]
            dummies = {f"{factor}[{lv}]": (values == lv).astype(float) for lv in levels[1:]}
    return Design(
        tuple(labels[i] for i in keep),
        cols[y],
        cols,
        factor,
        reference,
        dummies,
        tuple(excluded),
        ft,
        tuple(c for c in numeric if not logged[c] and log != "none"),
    )


def fit_design(
    d: Design,
    y: str,
    predictors: Sequence[str],
    *,
    method: str = "ols",
    lambda_: Any = "ml",
    ci: float = 0.95,
    log: str = "10",
    against: Mapping[str, float] | None = None,
    flags: bool = False,
) -> MultipleFit:
    """Fit y ~ predictors (+ the design's factor) on the rows of *d* by OLS or PGLS (ML);
    *against* (term -> value) adds the joint Wald F test of those values, *flags* the
    outlier and influence flags (:func:`point_flags`)."""
    from scipy.special import stdtr, stdtrit

    X, names = d.matrix(predictors)
    n, p = X.shape
    extra = 1 if method == "pgls" and _estimated(lambda_) else 0
    k = p + 1 + extra
    if n < k + 2:
        raise UsageError(
            f"the model {y} ~ {' + '.join(names[1:]) or '1'} has {k} parameters and needs at least "
            f"{k + 2} taxa (AICc needs n - k - 1 > 0); {n} taxa have every variable"
        )
    if np.linalg.matrix_rank(X) < p:
        raise UsageError(
            f"the predictors {', '.join(names[1:])} are collinear on these {n} taxa "
            "(one is a combination of the others, or a factor level has no taxa)"
        )
    lam = lam_ci = None
    if method == "pgls":
        from comparo.phylo.likelihood import fit_lambda

        lf = fit_lambda(d.tree, X, d.y, lambda_, None, False, ci)
        beta, cov, rss, loglik = lf.fit.beta, lf.fit.cov, lf.fit.rss, lf.loglik
        lam, lam_ci = lf.lam, lf.ci
    elif method == "robust":
        return _robust(d, y, predictors, X, names, ci, log, against)
    else:
        XtX = X.T @ X
        beta = np.linalg.solve(XtX, X.T @ d.y)
        resid = d.y - X @ beta
        rss = float(resid @ resid)
        cov = rss / (n - p) * np.linalg.inv(XtX)
        loglik = -0.5 * n * (math.log(2.0 * math.pi * max(rss, 1e-300) / n) + 1.0)
    df = n - p
    tq = float(stdtrit(df, 0.5 + ci / 2.0))
    se = np.sqrt(np.diag(cov))
    terms = []
    for name, b, s in zip(names, beta, se, strict=True):
        t = b / s if s > 0 else math.nan
        terms.append(
            {
                "term": name,
                "estimate": _f(b),
                "se": _f(s),
                "ci": [_f(b - tq * s), _f(b + tq * s)],
                "t": _f(t),
                "p": _f(2.0 * stdtr(df, -abs(t))) if math.isfinite(t) else None,
            }
        )
    test = None if not against else wald_test(beta, cov, names, against, df, bool(extra))
    outliers, note = (
        point_flags(X, d.y, d.labels, d.tree if method == "pgls" else None, lam)
        if flags
        else ((), None)
    )
    return MultipleFit(
        method,
        y,
        tuple(predictors),
        d.factor,
        d.reference,
        log,
        n,
        tuple(terms),
        float(loglik),
        k,
        aicc(float(loglik), k, n),
        float(ci),
        lam,
        None if lam_ci is None else tuple(lam_ci),
        bool(extra),
        float(rss),
        d.excluded,
        test,
        tuple(outliers),
        note,
        linear=tuple(c for c in predictors if c in d.linear),
    )


def point_flags(
    X: np.ndarray, y: np.ndarray, labels: Sequence[str], tree: Any = None, lam: float | None = None
) -> tuple[list[dict], str | None]:
    """Bonferroni-studentized residual, leverage (2p/n) and Cook's distance flags of the
    least-squares fit y = X beta, the rules of :mod:`comparo.fitting.flags` with p = the columns of
    X; for PGLS (*tree* and *lam*) on the phylogenetically whitened regression W y = W X beta,
    W = C(lambda)^(-1/2). Returns the flags ``{"label", "reason", "statistic"}`` and a note
    when they could not be computed (a PGLS on more taxa than the dense whitener takes)."""
    from comparo.base.quantiles import f_quantile
    from comparo.fitting.flags import bonferroni_cut, influence_design, phylo_whitener, point_flags

    n, p = X.shape
    if n - p - 1 <= 0:
        return [], "no flags: too few taxa for the studentized residuals"
    if tree is not None:
        try:
            W = phylo_whitener(tree, float(lam))
        except ValueError as exc:
            return [], f"no flags: {exc}"
        X, y = W @ X, W @ y
    _, _, t, h, dcook = influence_design(X, y)
    cuts = {
        "bonferroni": bonferroni_cut(n, p),
        "leverage": 2.0 * p / n,
        "cooks_4n": 4.0 / n,
        "cooks_f": f_quantile(p, n - p, 0.5),
        "alpha": 0.05,
    }
    out = []
    for i, lab in enumerate(labels):
        out += [f.to_dict() for f in point_flags(i, lab, t[i], h[i], dcook[i], cuts, p, n)]
    return out, ("flags on the phylogenetically whitened regression" if tree is not None else None)


def wald_test(
    beta: np.ndarray,
    cov: np.ndarray,
    names: Sequence[str],
    values: Mapping[str, float],
    df: int | None,
    lambda_estimated: bool = False,
) -> dict:
    """Joint Wald test of H0: beta_j = v_j for the named terms, F = d'(R cov R')^-1 d / q
    with d = R beta - v, on F(q, n - p): the extra-sum-of-squares F of OLS, and of GLS at a
    fixed lambda; with lambda estimated, lambda is treated as known (its estimate). With
    *df* None (the robust fit, whose covariance is asymptotic) W = d'(R cov R')^-1 d on a
    chi-square with q df; ``df`` is then ``[q, None]``."""
    from scipy.special import chdtrc, fdtrc

    from comparo.base.arguments import check_finite

    values = {t: check_finite(v, f"the value of {t} to test against") for t, v in values.items()}
    unknown = [t for t in values if t not in names]
    if unknown:
        raise UsageError(
            f"--against names {', '.join(map(repr, unknown))}, not a term of the model "
            f"(terms: {', '.join(names)})"
        )
    idx = [names.index(t) for t in values]
    R = np.zeros((len(idx), len(names)))
    R[np.arange(len(idx)), idx] = 1.0
    dvec = R @ beta - np.array([float(v) for v in values.values()])
    q = len(idx)
    wald = float(dvec @ np.linalg.solve(R @ cov @ R.T, dvec))
    if df is None:
        return {
            "terms": {t: float(v) for t, v in values.items()},
            "test": "chi-square (Wald)",
            "statistic": _f(wald),
            "df": [q, None],
            "p": _f(chdtrc(q, wald)),
            "note": "asymptotic: chi-square with q df on the robust covariance",
        }
    stat = wald / q
    return {
        "terms": {t: float(v) for t, v in values.items()},
        "test": "F (Wald)",
        "statistic": _f(stat),
        "df": [q, int(df)],
        "p": _f(fdtrc(q, df, stat)),
        "note": "conditional on the ML estimate of lambda, treated as known"
        if lambda_estimated
        else None,
    }


def _robust(
    d: Design,
    y: str,
    predictors: Sequence[str],
    X: np.ndarray,
    names: list[str],
    ci: float,
    log: str,
    against: Mapping[str, float] | None,
) -> MultipleFit:
    """Huber M-estimate of y on the columns of X (statsmodels RLM, c = 1.345 and MAD scale as the
    one-predictor robust line): Wald z terms with normal p and CIs; no likelihood, so
    loglik and AICc are NaN; flags: those of the least-squares fit and Huber weights below 0.5
    (as the one-predictor robust line); *against* a chi-square Wald test on q df."""
    import statsmodels.api as sm
    from scipy.special import ndtr, ndtri

    from comparo.fitting.robust import HUBER_C

    n, p = X.shape
    res = sm.RLM(d.y, X, M=sm.robust.norms.HuberT(t=HUBER_C)).fit()
    beta, cov = np.asarray(res.params, dtype=float), np.asarray(res.cov_params(), dtype=float)
    zq = float(ndtri(0.5 + ci / 2.0))
    terms = []
    for name, b, s in zip(names, beta, np.sqrt(np.diag(cov)), strict=True):
        z = b / s if s > 0 else math.nan
        terms.append(
            {
                "term": name,
                "estimate": _f(b),
                "se": _f(s),
                "ci": [_f(b - zq * s), _f(b + zq * s)],
                "t": _f(z),
                "p": _f(2.0 * ndtr(-abs(z))) if math.isfinite(z) else None,
            }
        )
    test = None if not against else wald_test(beta, cov, names, against, None)
    w = np.broadcast_to(np.asarray(res.weights, dtype=float), (n,))
    outliers, note = point_flags(X, d.y, d.labels)
    outliers += [
        {
            "label": lab,
            "reason": f"robust (Huber) weight below {_WEIGHT_CUT:g}",
            "statistic": float(wi),
        }
        for lab, wi in zip(d.labels, w, strict=True)
        if wi < _WEIGHT_CUT
    ]
    resid = d.y - X @ beta
    return MultipleFit(
        "robust",
        y,
        tuple(predictors),
        d.factor,
        d.reference,
        log,
        n,
        tuple(terms),
        math.nan,
        p + 1,
        math.nan,
        float(ci),
        rss=float(resid @ resid),
        excluded=d.excluded,
        against=test,
        outliers=tuple(outliers),
        flags_note=note,
        linear=tuple(c for c in predictors if c in d.linear),
    )


def _estimated(lambda_: Any) -> bool:
    return isinstance(lambda_, str) and lambda_.strip().lower() == "ml"


def multiple_fit(
    table: pd.DataFrame,
    y: str,
    predictors: Sequence[str],
    *,
    factor: str | None = None,
    method: str = "ols",
    log: str = "10",
    ci: float = 0.95,
    tree: Any = None,
    lambda_: Any = "ml",
    tree_labels: Mapping[str, str] | None = None,
    taxon_col: str = "taxon",
    against: Mapping[str, float] | None = None,
    linear: Sequence[str] | None = None,
) -> MultipleFit:
    """Multiple regression of y on *predictors* (quantity keys or columns, each log-transformed
    like y) and a *factor* (treatment coding, the first level in sorted order the reference).
    Predictors named in *linear*, and ``temperature_c`` (degrees Celsius, an interval scale),
    enter untransformed (:func:`linear_predictors`); JSON ``terms[].scale`` says which.

    ``method`` "ols" or "pgls" (Pagel's lambda by maximum likelihood with ``lambda_="ml"``,
    or fixed); the log-likelihood is the maximum likelihood in both. Rows missing any
    variable (or, for pgls, a tip) are left out and listed in ``excluded``. *against*
    (term -> value, e.g. ``{"body_mass": -0.25, "temperature_c": 0}``) adds the joint Wald
    F test of those values (key ``against``).
    """
    predictors = list(predictors)
    log = check_options(log, ci, method, len(predictors), FIT_METHODS)
    if method == "pgls" and tree is None:
        raise UsageError("method pgls needs a tree")
    d = design(
        table,
        y,
        predictors,
        factor=factor,
        log=log,
        taxon_col=taxon_col,
        tree=tree if method == "pgls" else None,
        tree_labels=tree_labels,
        linear=linear_predictors(predictors, linear, y),
    )
    return fit_design(
        d,
        y,
        predictors,
        method=method,
        lambda_=lambda_,
        ci=ci,
        log=log,
        against=against,
        flags=True,
    )
