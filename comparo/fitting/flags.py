"""Outlier and influence flags for a straight-line fit.

Each flag names the point (its taxon label), the rule it breaks and the
statistic behind it. Flags never remove a point; they tell the user where to
look. The diagnostics are those of the ordinary least-squares line on the
fitted (e.g. log) scale, computed in closed form (:func:`influence`; equal to
statsmodels' ``OLSInfluence``, which refits n times); a robust
or LTS fit adds its own evidence (low weight, large robust residual).

For a phylogenetic (PGLS) fit the same rules apply to the phylogenetically
whitened regression W y = W [1 x] beta + e, W = C(lambda)^(-1/2) the symmetric
inverse square root of the fitted Pagel-lambda covariance (:func:`phylo_whitener`):
ordinary least squares on the whitened values is the PGLS fit, and its residuals
W (y - a - b x) are the normalised residuals of a generalised least-squares fit
(Pinheiro & Bates 2000, section 5.2.1, there with a Cholesky factor).

Rules (p = 2 coefficients, n points):

* externally studentized residual t_i beyond the Bonferroni cut
  t(1 - alpha/(2n); n - p - 1) (Cook & Weisberg 1982);
* leverage h_ii > 2p/n (Hoaglin & Welsch 1978);
* Cook's distance D_i > 4/n (common practice) or, stronger, D_i > F(0.5; p, n - p)
  (Cook 1977);
* Huber weight below ``weight_cut`` (robust fits; 0.5 by common practice);
* |standardized LTS residual| > 2.5 (Rousseeuw & Leroy 1987).

References
----------
Cook, R. D. (1977). Detection of influential observation in linear regression.
    Technometrics 19, 15-18.
Cook, R. D. & Weisberg, S. (1982). *Residuals and Influence in Regression*.
    Chapman & Hall.
Pinheiro, J. C. & Bates, D. M. (2000). *Mixed-Effects Models in S and S-PLUS*.
    Springer.
Hoaglin, D. C. & Welsch, R. E. (1978). The hat matrix in regression and ANOVA.
    The American Statistician 32, 17-22.
Rousseeuw, P. J. & Leroy, A. M. (1987). *Robust Regression and Outlier
    Detection*. Wiley.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

#: reasons that mean "this point does not fit the line" (not merely "it pulls on it")
OUTLIER_RULES = ("bonferroni", "robust_weight", "lts_residual")
#: every rule id :func:`flag_points` can emit
ALL_RULES = ("bonferroni", "leverage", "cooks_d", "robust_weight", "lts_residual")
#: what ``drop_flagged=True`` (``--drop-flagged`` without a value) drops: the misfit rules only.
#: Leverage and Cook's distance measure how hard a point pulls on the line, not that it is
#: wrong; the smallest and largest taxa of a scaling study have high leverage by design.
DEFAULT_DROP_RULES = OUTLIER_RULES
_RULE_NAMES = {
    "outlier": OUTLIER_RULES,
    "outliers": OUTLIER_RULES,
    "default": DEFAULT_DROP_RULES,
    "all": ALL_RULES,
    "any": ALL_RULES,
    "cook": ("cooks_d",),
    "cooks": ("cooks_d",),
    **{r: (r,) for r in ALL_RULES},
}


@dataclass(frozen=True)
class Flag:
    """One broken rule at one point.

    Attributes
    ----------
    label : str
        Taxon (or row) label.
    rule : str
        Short id: ``bonferroni``, ``leverage``, ``cooks_d``, ``robust_weight``,
        ``lts_residual``.
    reason : str
        The rule in words, with its cut-off.
    statistic : float
        The point's value of the statistic the rule tests (dimensionless).
    index : int
        Position of the point in the arrays given to :func:`flag_points` (-1: unknown).
    """

    label: str
    rule: str
    reason: str
    statistic: float
    index: int = -1

    def to_dict(self) -> dict:
        """``{"label", "reason", "statistic"}`` as in the fit JSON contract."""
        return {"label": self.label, "reason": self.reason, "statistic": float(self.statistic)}


@dataclass(frozen=True)
class FlagReport:
    """Influence diagnostics and flags of one fit.

    Attributes
    ----------
    flags : tuple of Flag
        Every broken rule, in point order.
    table : tuple of dict
        One record per point: label, leverage, studentized (external),
        cooks_d, and weight / lts_std when given.
    cuts : dict
        The cut-offs used (``bonferroni``, ``leverage``, ``cooks_4n``, ``cooks_f``; dimensionless)
        and ``alpha``.
    residuals : str
        ``"ols"`` (least-squares line of y on x on the fitted scale) or ``"whitened"``
        (phylogenetically whitened regression, :func:`phylo_whitener`).
    """

    flags: tuple[Flag, ...]
    table: tuple[dict, ...] = field(repr=False)
    cuts: dict
    residuals: str = "ols"

    def to_dict(self) -> dict:
        return {
            "flags": [f.to_dict() for f in self.flags],
            "cuts": dict(self.cuts),
            "residuals": self.residuals,
        }

    def to_frame(self) -> pd.DataFrame:
        import pandas as pd

        return pd.DataFrame(list(self.table))

    def labels(self, rules: tuple[str, ...] | None = None) -> list[str]:
        """Labels flagged by any of *rules* (all rules when None), without repeats."""
        out: list[str] = []
        for f in self.flags:
            if (rules is None or f.rule in rules) and f.label not in out:
                out.append(f.label)
        return out

    def summary(self) -> str:
        if not self.flags:
            return "No point breaks a flag rule."
        lines = [f"{len(self.flags)} flag(s):"]
        lines += [f"  {f.label}: {f.reason} (statistic {f.statistic:.4g})" for f in self.flags]
        return "\n".join(lines)


def drop_rules(spec: bool | str | list[str] | tuple[str, ...] | None) -> tuple[str, ...]:
    """Rule ids selected by a ``drop_flagged`` / ``--drop-flagged`` value.

    ``True``, ``"default"`` or ``""`` give :data:`DEFAULT_DROP_RULES` (``bonferroni``,
    ``robust_weight``, ``lts_residual``: points that do not fit the line); a comma list
    may name rule ids (``bonferroni``, ``leverage``, ``cooks_d``, ``robust_weight``,
    ``lts_residual``) and the groups ``outlier`` (the misfit rules), ``cook`` (=
    ``cooks_d``) and ``all``. ``None`` or ``False`` give ``()``.

    Raises
    ------
    UsageError
        For a name that is not a rule or group.
    """
    from comparo.base.errors import UsageError

    if spec is None or spec is False:
        return ()
    if spec is True:
        return DEFAULT_DROP_RULES
    names = [p.strip().lower() for p in (spec.split(",") if isinstance(spec, str) else spec)]
    names = [p for p in names if p] or ["default"]
    out: list[str] = []
    for name in names:
        if name not in _RULE_NAMES:
            raise UsageError(
                f"--drop-flagged: unknown rule {name!r}; choose from {', '.join(ALL_RULES)}, or "
                f"the groups outlier, cook, all"
            )
        out += [r for r in _RULE_NAMES[name] if r not in out]
    return tuple(r for r in ALL_RULES if r in out)


def bonferroni_cut(n: int, p: int = 2, alpha: float = 0.05) -> float:
    """Two-sided Bonferroni cut-off for the largest |externally studentized residual|.

    Returns t(1 - alpha/(2n); n - p - 1).
    """
    from comparo.base.quantiles import t_quantile

    return t_quantile(n - p - 1, 1.0 - alpha / (2.0 * n))


def influence(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Externally studentized residuals, leverages and Cook's distances of the OLS line y = a + b x.

    Closed forms for a straight line (p = 2), the same numbers as statsmodels'
    ``OLSInfluence`` without its n leave-one-out refits:
    h_i = 1/n + (x_i - xbar)^2 / Sxx; s_(i)^2 = ((n - p) s^2 - e_i^2/(1 - h_i)) / (n - p - 1);
    t_i = e_i / (s_(i) sqrt(1 - h_i)); D_i = e_i^2 h_i / (p s^2 (1 - h_i)^2)
    (Cook & Weisberg 1982, ch. 2 and 3). Dimensionless.
    """
    n, p = len(x), 2
    xc = x - x.mean()
    sxx = float(xc @ xc)
    b = float(xc @ (y - y.mean())) / sxx
    e = y - y.mean() - b * xc
    lev = 1.0 / n + xc * xc / sxx
    t_ext, cooks = _studentized(e, lev, p)
    return t_ext, lev, cooks


def _studentized(e: np.ndarray, lev: np.ndarray, p: int) -> tuple[np.ndarray, np.ndarray]:
    """Externally studentized residuals and Cook's distances from residuals *e* and
    leverages *lev* of a least-squares fit with *p* coefficients (formulas of :func:`influence`)."""
    n = len(e)
    s2 = float(e @ e) / (n - p)
    one_h = 1.0 - lev
    with np.errstate(divide="ignore", invalid="ignore"):
        s2_i = np.maximum(((n - p) * s2 - e * e / one_h) / (n - p - 1), 0.0)
        t_ext = e / np.sqrt(s2_i * one_h)
        cooks = e * e * lev / (p * s2 * one_h * one_h)
    return t_ext, cooks


def influence_design(
    Z: np.ndarray, y: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Coefficients, residuals, externally studentized residuals, leverages and Cook's
    distances of the least-squares fit y = Z beta (any full-rank n x p design Z).

    The hat matrix H = Z (Z'Z)^-1 Z' comes from a thin QR factorisation (H = Q Q');
    then the formulas of :func:`influence` with this p (Cook & Weisberg 1982, ch. 2-3).
    Dimensionless except the coefficients and residuals (units of y).
    """
    n, p = Z.shape
    q, r = np.linalg.qr(Z)
    beta = np.linalg.solve(r, q.T @ y)
    e = y - Z @ beta
    lev = np.einsum("ij,ij->i", q, q)
    t_ext, cooks = _studentized(e, lev, p)
    return beta, e, t_ext, lev, cooks


def phylo_whitener(ft, lam: float, *, max_tips: int = 2000) -> np.ndarray:
    """W = C(lambda)^(-1/2), the symmetric inverse square root of the Pagel-lambda covariance.

    *ft* is a :class:`comparo.phylo.FlatTree` of the fitted taxa (rows of W follow
    ``ft.tips``); C(lambda) = lambda C + (1 - lambda) diag(C) with C_ij the root-to-MRCA
    distance (Pagel 1999). The scale sigma^2 cancels in every flag statistic. The
    symmetric root (not a Cholesky factor) keeps W independent of the order of the
    taxa, so that whitened residual i belongs most to taxon i.

    Raises
    ------
    ValueError
        More than *max_tips* tips (dense n x n algebra), or C(lambda) singular
        (for instance lambda = 1 on a tree with zero-length tip edges).
    """
    n = ft.n_tips
    if n > max_tips:
        raise ValueError(
            f"whitened diagnostics need a dense {n} x {n} covariance; computed up to {max_tips} "
            f"taxa"
        )
    m = ft.n_nodes
    below = np.zeros((m, n))
    below[np.arange(n), np.arange(n)] = 1.0
    for k in range(len(ft.bounds) - 1):  # levels in post-order: children before parents
        sl = np.arange(ft.bounds[k], ft.bounds[k + 1])
        ch = sl[ft.parent[sl] >= 0]
        np.add.at(below, ft.parent[ch], below[ch])
    cov = (below.T * ft.length) @ below  # C = sum over edges of length * (tips below)(tips below)'
    cov = lam * cov + (1.0 - lam) * np.diag(np.diag(cov))
    w, v = np.linalg.eigh(cov)
    if w.min() <= 1e-12 * max(w.max(), 1e-300):
        raise ValueError(
            f"the covariance of the tree at lambda = {lam:g} is singular (zero-length tip edges?)"
        )
    return (v / np.sqrt(w)) @ v.T


def flag_points(
    x: np.ndarray,
    y: np.ndarray,
    labels: list[str],
    *,
    alpha: float = 0.05,
    weights: np.ndarray | None = None,
    weight_cut: float = 0.5,
    lts_std: np.ndarray | None = None,
    lts_cut: float = 2.5,
    whiten: np.ndarray | None = None,
) -> FlagReport:
    """Flag outlying and influential points of the line y = a + b x.

    Parameters
    ----------
    x, y : array
        The fitted-scale values (e.g. log10 body mass and log10 frequency).
    labels : list of str
        One label per point.
    alpha : float
        Family-wise level of the Bonferroni outlier test.
    weights : array, optional
        Final IRLS weights of a robust (Huber) fit, in [0, 1].
    weight_cut : float
        Weights below this are flagged (common practice: 0.5).
    lts_std : array, optional
        LTS residuals divided by the LTS scale.
    lts_cut : float
        |lts_std| above this is flagged (Rousseeuw & Leroy 1987: 2.5).
    whiten : array (n, n), optional
        W of a phylogenetic fit (:func:`phylo_whitener`): the rules are applied to the
        whitened regression W y = W [1 x] beta (residuals ``"whitened"``).

    Returns
    -------
    FlagReport
        ``table`` holds per point: label, fitted (a + b x of the line the rules refer
        to, fitted scale), residual (y - fitted; the whitened residual with *whiten*), leverage,
        studentized (external), cooks_d, and
        weight / lts_std when given.

    Notes
    -----
    With hat values h_ii and s_(i) the residual scale without point i,
    t_i = e_i / (s_(i) sqrt(1 - h_ii)) ~ t(n - p - 1) and
    D_i = r_i^2 h_ii / (p (1 - h_ii)) with r_i the internally studentized residual.
    """
    from comparo.base.quantiles import f_quantile

    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    n, p = len(x), 2
    Z = np.column_stack([np.ones(n), x])
    beta, resid, t_ext, lev, cooks = (
        influence_design(Z, y) if whiten is None else influence_design(whiten @ Z, whiten @ y)
    )
    fitted = Z @ beta
    cuts = {
        "bonferroni": bonferroni_cut(n, p, alpha),
        "leverage": 2.0 * p / n,
        "cooks_4n": 4.0 / n,
        "cooks_f": f_quantile(p, n - p, 0.5),
        "alpha": float(alpha),
    }
    flags: list[Flag] = []
    table: list[dict] = []
    for i, lab in enumerate(labels):
        rec = {
            "label": lab,
            "x": float(x[i]),
            "fitted": float(fitted[i]),
            "residual": float(resid[i]),
            "leverage": float(lev[i]),
            "studentized": float(t_ext[i]),
            "cooks_d": float(cooks[i]),
        }
        flags += point_flags(i, lab, t_ext[i], lev[i], cooks[i], cuts, p, n)
        if weights is not None:
            rec["weight"] = float(weights[i])
            if weights[i] < weight_cut:
                flags.append(
                    Flag(
                        lab,
                        "robust_weight",
                        f"robust (Huber) weight below {weight_cut:g}",
                        weights[i],
                        i,
                    )
                )
        if lts_std is not None:
            rec["lts_std"] = float(lts_std[i])
            if abs(lts_std[i]) > lts_cut:
                flags.append(
                    Flag(
                        lab,
                        "lts_residual",
                        f"|LTS residual / LTS scale| above {lts_cut:g}",
                        lts_std[i],
                        i,
                    )
                )
        table.append(rec)
    return FlagReport(
        flags=tuple(flags),
        table=tuple(table),
        cuts=cuts,
        residuals="ols" if whiten is None else "whitened",
    )


def point_flags(
    i: int, lab: str, t: float, h: float, d: float, cuts: dict, p: int, n: int
) -> list[Flag]:
    """The Bonferroni, leverage and Cook's distance flags of point *i* (the stronger Cook cut
    once)."""
    out = []
    if abs(t) > cuts["bonferroni"]:
        out.append(
            Flag(
                lab,
                "bonferroni",
                f"externally studentized residual beyond the Bonferroni cut "
                f"{cuts['bonferroni']:.4f} (alpha {cuts['alpha']:g})",
                t,
                i,
            )
        )
    if h > cuts["leverage"]:
        out.append(Flag(lab, "leverage", f"leverage above 2p/n = {cuts['leverage']:.4f}", h, i))
    if d > cuts["cooks_f"]:
        out.append(
            Flag(
                lab,
                "cooks_d",
                f"Cook's distance above F(0.5; {p}, {n - p}) = {cuts['cooks_f']:.4f}",
                d,
                i,
            )
        )
    elif d > cuts["cooks_4n"]:
        out.append(
            Flag(lab, "cooks_d", f"Cook's distance above 4/n = {cuts['cooks_4n']:.4f}", d, i)
        )
    return out


def fit_flags(
    result: Any,
    points: pd.DataFrame,
    *,
    tree: Any = None,
    tree_labels: Mapping[str, str] | None = None,
) -> FlagReport:
    """The flags of a fitted line, from its plotted points (one source for figure and flags).

    Parameters
    ----------
    result : comparo.fitting.FitResult
    points : DataFrame
        ``label``, ``x_fit``, ``y_fit`` of every fitted point (and ``weight`` /
        ``lts_std`` for robust and LTS fits), as in ``result.points``.
    tree, tree_labels : the tree of a PGLS fit and its taxon -> tip map.

    Returns
    -------
    FlagReport
        For OLS, SMA, MA, robust and LTS: the rules on the least-squares line of y on x
        on the fitted scale (leverage and Cook's distance are least-squares quantities;
        the same flags as ``result.outliers``). For PGLS: the rules on the
        phylogenetically whitened regression at the fitted lambda (:func:`phylo_whitener`).

    Raises
    ------
    ValueError
        PGLS without a tree, a whitened fit that does not reproduce the PGLS slope, or a
        covariance that cannot be whitened.
    """
    from comparo.phylo import flat_tree, match_tips

    labels = [str(v) for v in points["label"]]
    X, Y = points["x_fit"].to_numpy(float), points["y_fit"].to_numpy(float)
    if result.method != "pgls":
        w = (
            points["weight"].to_numpy(float)
            if result.method == "robust" and "weight" in points
            else None
        )
        s = (
            points["lts_std"].to_numpy(float)
            if result.method == "lts" and "lts_std" in points
            else None
        )
        return flag_points(X, Y, labels, weights=w, lts_std=s)
    if tree is None:
        raise ValueError("a PGLS fit needs its tree for whitened residuals")
    tip_of = match_tips(tree, labels, tree_labels).tip_of
    tips = [tip_of[lab] for lab in labels]
    ft = flat_tree(tree, tips)
    idx = ft.index(tips)
    lam = 1.0 if result.lambda_ is None else float(result.lambda_)
    W = phylo_whitener(ft, lam)[np.ix_(idx, idx)]
    rep = flag_points(X, Y, labels, whiten=W)
    slope = np.linalg.lstsq(W @ np.column_stack([np.ones(len(X)), X]), W @ Y, rcond=None)[0][1]
    if not np.isclose(slope, result.slope, rtol=1e-6, atol=1e-9):
        raise ValueError(
            f"the whitened regression gives slope {slope:.6g}, the PGLS fit {result.slope:.6g}"
        )
    return rep
