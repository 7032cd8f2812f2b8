"""Phylogenetic imputation of one quantity: the best linear unbiased predictor (BLUP) of
the tips without a value under Brownian motion after Pagel's lambda transform, the root
by GLS, in two linear-time passes over the tree; leave-one-out cross-validation from the
same passes.

Garland T, Ives AR (2000) Using the past to predict the present: confidence intervals for
regression equations in phylogenetic comparative methods. Am Nat 155:346-364.
Goldberger AS (1962) Best linear unbiased prediction in the generalized linear regression
model. JASA 57:369-375.
Felsenstein J (1973) Maximum-likelihood estimation of evolutionary trees from continuous
characters. Am J Hum Genet 25:471-492 (the pruning pass).
Pagel M (1999) Inferring the historical patterns of biological evolution. Nature 401:877-884.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.errors import UsageError
from comparo.base.jsonsafe import finite_or_none as _f
from comparo.base.results import Result
from comparo.phylo.flat import FlatTree, flat, pagel_edges

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

#: Fewest observed taxa on the tree an imputation accepts: lambda by ML and sigma² by
#: REML (n - 1 degrees of freedom) from fewer values give intervals too unstable to use.
MIN_OBSERVED = 5

#: Level of the prediction intervals.
PI_LEVEL = 0.95


@dataclass(frozen=True, eq=False)
class TipPredictions:
    """Every tip's value predicted from the observed values of all *other* tips.

    For a tip without a value this is its BLUP; for an observed tip, its leave-one-out
    prediction (the same formulas with that tip left out, lambda and sigma² held).

    Attributes
    ----------
    mean : numpy array (n_tips,)
        Predicted value (trait scale, here log10).
    var : numpy array (n_tips,)
        Prediction variance for a unit rate (multiply by sigma²), the root's unknown
        mean included: C_mm - c'C_oo⁻¹c + (1 - c'C_oo⁻¹1)²/(1'C_oo⁻¹1).
    root_mean, root_var : float
        GLS mean (1'C⁻¹y / 1'C⁻¹1) and its variance for a unit rate (1 / 1'C⁻¹1).
    """

    mean: np.ndarray
    var: np.ndarray
    root_mean: float
    root_var: float


def predict_tips(ft: FlatTree, y: np.ndarray, edges: np.ndarray | None = None) -> TipPredictions:
    """BLUP of every tip from the other tips' values, in two passes over the tree, O(n).

    Parameters
    ----------
    ft : FlatTree
        The tree; tip i is ``y[i]``.
    y : array (n_tips,)
        Values; NaN marks a tip without a value. At least 2 finite values.
    edges : array (n_nodes,), optional
        Edge lengths (e.g. :func:`pagel_edges`); the tree's own by default. Edges above
        tips with a value must be > 0.

    Notes
    -----
    Post-order (Felsenstein 1973 pruning), in precision form: a tip with value y and edge
    t sends up precision u = 1/t and information J = y/t; a tip without a value sends
    nothing. An internal node sums its children's (S, I) and sends up
    u = S/(1 + tS), J = I/(1 + tS) (its value given the tips below, N(I/S, 1/S), seen
    through its edge). At the root, I/S is the GLS mean and 1/S its variance.
    Pre-order: the root has no information from above (a flat prior on the root value,
    which makes the predictor the GLS-based BLUP of Goldberger 1962); a child c of p
    receives, from everything outside its subtree, R = Q_p + S_p - u_c and
    K = K_p + I_p - J_c, seen through its edge: Q_c = R/(1 + tR), K_c = K/(1 + tR).
    At a tip the prediction is K/Q with variance 1/Q: for a tip without a value that
    is the conditional distribution given all observed tips; for an observed tip, given
    all the others (leave-one-out). Nodes of one level are handled together with numpy.
    """
    y = np.asarray(y, dtype=float)
    n, N = ft.n_tips, ft.n_nodes
    if y.shape != (n,):
        raise ValueError(f"y has shape {y.shape} for a tree of {n} tips")
    t = ft.length if edges is None else np.asarray(edges, dtype=float)
    obs = np.isfinite(y)
    if int(obs.sum()) < 2:
        raise UsageError("fewer than 2 tips have a value: nothing to predict from")
    if np.any(~(t[:n][obs] > 0)):
        raise UsageError(
            "a tip with a value has an edge of length 0: its variance is 0 (use lambda < 1)"
        )
    S = np.zeros(N)  # precision from below, at each node
    I = np.zeros(N)  # noqa: E741 - information (precision x mean) from below
    u = np.zeros(N)  # precision sent up through the edge
    J = np.zeros(N)  # information sent up
    u[:n][obs] = 1.0 / t[:n][obs]
    J[:n][obs] = y[obs] / t[:n][obs]
    bounds = ft.bounds
    top = len(bounds) - 2
    for k in range(top + 1):
        a, b = int(bounds[k]), int(bounds[k + 1])
        if k > 0:
            d = 1.0 + t[a:b] * S[a:b]
            u[a:b] = S[a:b] / d
            J[a:b] = I[a:b] / d
        if k < top:
            starts, parents = ft.segments[k]
            S[parents] += np.add.reduceat(u[a:b], starts)
            I[parents] += np.add.reduceat(J[a:b], starts)
    Q = np.zeros(N)  # precision from above (outside the subtree), at each node
    K = np.zeros(N)
    for k in range(top - 1, -1, -1):
        a, b = int(bounds[k]), int(bounds[k + 1])
        p = ft.parent[a:b]
        R = Q[p] + S[p] - u[a:b]
        RI = K[p] + I[p] - J[a:b]
        d = 1.0 + t[a:b] * R
        Q[a:b] = R / d
        K[a:b] = RI / d
    root = N - 1
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = K[:n] / Q[:n]
        var = 1.0 / Q[:n]
    return TipPredictions(mean, var, float(I[root] / S[root]), float(1.0 / S[root]))


def _observed_tree(topo: Any, ft: FlatTree, observed: list[str]) -> FlatTree:
    """The tree pruned to *observed* tips, keeping the edge from their common ancestor up
    to the root of the whole tree *ft* (root distances as in *ft*), so that Pagel's
    lambda transforms the covariance of the observed tips exactly as it does on the
    whole tree: C_oo(lambda) = lambda·C_oo + (1 - lambda)·diag(C_oo)."""
    fo = flat(topo, observed)
    full_depth = ft.root_dist[ft.index(fo.tips[:1])][0]
    d = float(full_depth - fo.root_dist[0])
    if d <= 0:
        return fo
    length = fo.length.copy()
    length[-1] = d
    return replace(fo, length=length, root_dist=fo.root_dist + d)


@dataclass(frozen=True, eq=False)
class Imputation(Result):
    """Phylogenetic imputation of one quantity (on log10 of its per-taxon values).

    Attributes
    ----------
    quantity, unit : str
        Catalogue key and its canonical unit (the unit of ``value`` and ``pi``).
    lambda_ : float
        Pagel's lambda used (ML, or as given).
    lambda_estimated : bool
        True when lambda was estimated by ML.
    lambda_ci : (float, float) or None
        Profile-likelihood 95% interval of lambda (when estimated).
    sigma2 : float
        BM rate by REML, (log10 units)² per branch-length unit.
    root_log_value : float
        GLS estimate of the root value (log10 of the canonical unit).
    taxa : tuple of str
        Every taxon on the tree: observed ones first, then imputed, each alphabetically.
    observed : numpy bool array
    log_value, log_se, value, pi_low, pi_high : numpy arrays
        log10 value, its standard error (log10 units: the prediction SE of an imputed
        taxon; the measurement uncertainty on the log scale of an observed one, NaN when
        none), value in ``unit`` and the 95% prediction interval in ``unit`` (NaN for
        observed taxa).
    loo_log_value, loo_log_se : numpy arrays
        Leave-one-out prediction of each observed taxon from the others (NaN for imputed).
    rmse_log, coverage : float
        Leave-one-out RMSE (log10 units) and the share of observed values inside their
        leave-one-out 95% interval.
    taxa_without_tips : tuple of str
        Taxa with a value but no tip: not used, not imputed.
    with_ : tuple of str
        Correlated quantities used (empty: relatives only).
    trait_cov : numpy array (p, p) or None
        With correlated quantities: the trait covariance R per branch-length unit (REML,
        log10 units², this quantity first, then ``with_`` in order).
    engine : dict or None
        The engine's state (tree, edges, tip values, rates, the row order of
        :attr:`taxa`) that :meth:`draws` needs; not part of the output.
    """

    quantity: str
    unit: str
    lambda_: float
    lambda_estimated: bool
    lambda_ci: tuple[float, float] | None
    sigma2: float
    root_log_value: float
    taxa: tuple[str, ...]
    observed: np.ndarray
    log_value: np.ndarray
    log_se: np.ndarray
    value: np.ndarray
    pi_low: np.ndarray
    pi_high: np.ndarray
    loo_log_value: np.ndarray
    loo_log_se: np.ndarray
    rmse_log: float
    coverage: float
    taxa_without_tips: tuple[str, ...] = ()
    with_: tuple[str, ...] = ()
    trait_cov: np.ndarray | None = None
    engine: dict | None = field(default=None, repr=False, compare=False)

    @property
    def n_observed(self) -> int:
        return int(self.observed.sum())

    @property
    def n_imputed(self) -> int:
        return int((~self.observed).sum())

    def to_dict(self) -> dict:
        """The JSON of ``comparo impute --format json`` (units: ``value`` and ``pi`` in the
        quantity's canonical unit, ``log_value`` and ``log_se`` in log10 of it)."""
        rows = []
        for i, name in enumerate(self.taxa):
            obs = bool(self.observed[i])
            pi = None if obs else [_f(self.pi_low[i]), _f(self.pi_high[i])]
            rows.append(
                {
                    "taxon": name,
                    "observed": obs,
                    "value": _f(self.value[i]),
                    "log_value": _f(self.log_value[i]),
                    "log_se": _f(self.log_se[i]),
                    "pi": pi,
                }
            )
        return {
            "quantity": self.quantity,
            "lambda": _f(self.lambda_),
            "with": list(self.with_),
            "n_observed": self.n_observed,
            "n_imputed": self.n_imputed,
            "taxa": rows,
            "cross_validation": {"rmse_log": _f(self.rmse_log), "coverage": _f(self.coverage)},
        }

    def to_frame(self) -> pd.DataFrame:
        """One row per taxon: the JSON's fields (``pi_low``, ``pi_high``) and the
        leave-one-out prediction of the observed taxa (``loo_log_value``, ``loo_log_se``)."""
        import pandas as pd

        return pd.DataFrame(
            {
                "taxon": list(self.taxa),
                "observed": self.observed,
                "value": self.value,
                "log_value": self.log_value,
                "log_se": self.log_se,
                "pi_low": self.pi_low,
                "pi_high": self.pi_high,
                "loo_log_value": self.loo_log_value,
                "loo_log_se": self.loo_log_se,
            }
        )

    def _notes(self) -> list[str]:
        ci = self.lambda_ci
        how = f"ML, 95% profile interval [{ci[0]:.3g}, {ci[1]:.3g}]" if ci else "given"
        notes = [
            f"Pagel's lambda = {self.lambda_:.4g} ({how})",
            f"BM rate sigma² = {self.sigma2:.4g} (REML, log10 units² per branch-length unit)",
        ]
        if self.with_ and self.trait_cov is not None:
            R = self.trait_cov
            d = np.sqrt(np.diag(R))
            cors = ", ".join(
                f"{q} {R[0, j + 1] / (d[0] * d[j + 1]):+.3f}" for j, q in enumerate(self.with_)
            )
            notes.append(
                "with correlated quantities (multivariate BM, trait covariance by REML, "
                f"missing values integrated out): evolutionary correlation {cors}"
            )
        notes += [
            f"root (GLS) = {self.root_log_value:.4g} log10 {self.unit}",
            f"leave-one-out check over {self.n_observed} observed taxa: RMSE = {self.rmse_log:.3g} "
            f"log10 units (a factor {10**self.rmse_log:.3g}),",
            f"  {100 * self.coverage:.1f}% inside their 95% interval (lambda and sigma² held "
            "at the full-data values)",
        ]
        without = self.taxa_without_tips
        if without:
            shown = ", ".join(without[:10]) + (" ..." if len(without) > 10 else "")
            notes.append(f"{len(without)} taxa with a value have no tip (not used): {shown}")
        notes.append(
            "imputed values are predictions from relatives under Brownian motion, not measurements"
        )
        return notes

    def summary(self) -> str:
        """Text for people: the model, the cross-validation, then the imputed taxa."""
        lines = [
            f"phylogenetic imputation of {self.quantity} ({self.unit}), log10 scale: "
            f"{self.n_observed} observed, {self.n_imputed} imputed"
        ]
        lines += ["  " + s for s in self._notes()]
        imp = np.flatnonzero(~self.observed)
        if imp.size:
            w = max(len("taxon"), *(len(self.taxa[i]) for i in imp))
            lines.append("")
            lines.append(
                f"  {'taxon':<{w}}  {'imputed':>11}  {'log10':>8}  {'SE':>7}  "
                "95% prediction interval"
            )
            for i in imp:
                lines.append(
                    f"  {self.taxa[i]:<{w}}  {self.value[i]:>11.4g}  "
                    f"{self.log_value[i]:>8.4f}  {self.log_se[i]:>7.4f}  "
                    f"[{self.pi_low[i]:.4g}, {self.pi_high[i]:.4g}]"
                )
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        from comparo.base.display import frame_html

        frame = self.to_frame()
        frame = frame[~frame["observed"]].drop(columns=["observed", "loo_log_value", "loo_log_se"])
        title = (
            f"Phylogenetic imputation of {self.quantity} ({self.unit}): "
            f"{self.n_observed} observed, {self.n_imputed} imputed"
        )
        return frame_html(title, frame, self._notes())


def _lambda_arg(lambda_: Any) -> Any:
    if isinstance(lambda_, str) and lambda_.strip().lower() == "ml":
        return "ml"
    try:
        lam = float(lambda_)
    except (TypeError, ValueError):
        raise UsageError(f"lambda must be 'ml' or a number in [0, 1], got {lambda_!r}") from None
    if not 0.0 <= lam <= 1.0:
        raise UsageError(f"lambda must be in [0, 1], got {lam}")
    return lam


def _tip_vector(ft: FlatTree, log_values: dict[str, float]) -> np.ndarray:
    y = np.full(ft.n_tips, np.nan)
    where = {tip: i for i, tip in enumerate(ft.tips)}
    for tip, v in log_values.items():
        if tip in where and math.isfinite(v):
            y[where[tip]] = v
    return y


def _lambda_fit(topo: Any, ft: FlatTree, y: np.ndarray, lam_arg: Any) -> Any:
    """Pagel's lambda of the values *y* (NaN: none) of the tips of *ft*, by ML or given,
    on the observed tips with the edge up to the whole tree's root kept."""
    from comparo.phylo.likelihood import fit_lambda

    obs = np.isfinite(y)
    n_o = int(obs.sum())
    if n_o < MIN_OBSERVED:
        raise UsageError(
            f"{n_o} taxa with a value are on the tree; imputation needs at least {MIN_OBSERVED}"
        )
    observed = [ft.tips[i] for i in np.flatnonzero(obs)]
    fo = _observed_tree(topo, ft, observed)
    yo = y[ft.index(fo.tips)]
    return fit_lambda(fo, np.ones((n_o, 1)), yo, lam_arg, None, False, PI_LEVEL)


def impute_tree(tree: Any, log_values: dict[str, float], lambda_: Any = "ml") -> dict:
    """The imputation on a tree from log10 values keyed by tip label (the engine of
    :func:`impute`, for any tree and values).

    Returns a dict of numpy arrays in the order of ``tips`` (every tip of the tree):
    ``tips``, ``observed``, ``log_value``, ``log_se``, ``loo_log_value``, ``loo_log_se``,
    and ``lambda``, ``lambda_estimated``, ``lambda_ci``, ``sigma2``, ``root`` (GLS, from
    the engine), ``root_passes`` (the same from the passes), ``t`` (the
    Student t quantile of the 95% intervals, n_observed - 1 degrees of freedom).
    """
    from comparo.base.quantiles import t_quantile
    from comparo.phylo.trees import as_topo

    lam_arg = _lambda_arg(lambda_)
    topo = as_topo(tree)
    ft = flat(topo, None)
    y = _tip_vector(ft, log_values)
    obs = np.isfinite(y)
    n_o = int(obs.sum())
    lf = _lambda_fit(topo, ft, y, lam_arg)
    lam = float(lf.lam)
    mu, s2 = float(lf.fit.beta[0]), float(lf.fit.sigma2)
    edges = pagel_edges(ft, lam)
    pred = predict_tips(ft, y, edges)
    se = np.sqrt(s2 * pred.var)
    log_value = np.where(obs, y, pred.mean)
    return {
        "tips": ft.tips,
        "observed": obs,
        "log_value": log_value,
        "log_se": np.where(obs, np.nan, se),
        "loo_log_value": np.where(obs, pred.mean, np.nan),
        "loo_log_se": np.where(obs, se, np.nan),
        "lambda": lam,
        "lambda_estimated": lam_arg == "ml",
        "lambda_ci": lf.ci,
        "sigma2": s2,
        "root": mu,
        "root_passes": pred.root_mean,
        "t": t_quantile(n_o - 1, 0.5 + PI_LEVEL / 2),
        "flat": ft,
        "edges": edges,
        "Y": y[:, None],
        "R": None,
    }


def impute_tree_with(
    tree: Any,
    log_values: dict[str, float],
    with_values: list[dict[str, float]],
    lambda_: Any = "ml",
) -> dict:
    """:func:`impute_tree` with correlated traits: the conditional expectation of the
    target under multivariate Brownian motion, given every observed value of every trait.

    *log_values* holds the target (log10, keyed by tip label), *with_values* one dict per
    correlated trait. Pagel's lambda is that of the target alone (ML or given) and
    transforms the tree for all traits; the trait covariance R (per unit branch length)
    is estimated by REML on all traits at once, missing values integrated out
    (:func:`comparo.phylo.multitrait.fit_trait_covariance`). The prediction of a tip is
    the Gaussian of its target given all the other tips' values and its own values of
    the other traits (the root by GLS, its uncertainty included); for an observed tip
    that is its leave-one-out prediction (lambda and R held). Returns the keys of
    :func:`impute_tree` with ``sigma2`` = R[0, 0], plus ``R`` (p x p, target first).
    """
    from comparo.base.quantiles import t_quantile
    from comparo.phylo.multitrait import (
        condition_on_own,
        fit_trait_covariance,
        tip_conditionals,
    )
    from comparo.phylo.trees import as_topo

    lam_arg = _lambda_arg(lambda_)
    topo = as_topo(tree)
    ft = flat(topo, None)
    y = _tip_vector(ft, log_values)
    Y = np.column_stack([y] + [_tip_vector(ft, w) for w in with_values])
    obs = np.isfinite(y)
    n_o = int(obs.sum())
    lf = _lambda_fit(topo, ft, y, lam_arg)
    lam = float(lf.lam)
    edges = pagel_edges(ft, lam)
    keep = np.isfinite(Y).any(axis=1)
    if lam == 1.0 and np.any(keep & ~(edges[: ft.n_tips] > 0)):
        edges = pagel_edges(ft, 1.0 - 1e-6)
    R, _ = fit_trait_covariance(ft, Y, edges)
    tc = tip_conditionals(ft, Y, R, edges)
    mean, var = condition_on_own(tc.mean, tc.cov, Y, 0)
    se = np.sqrt(np.maximum(var, 0.0))
    return {
        "tips": ft.tips,
        "observed": obs,
        "log_value": np.where(obs, y, mean),
        "log_se": np.where(obs, np.nan, se),
        "loo_log_value": np.where(obs, mean, np.nan),
        "loo_log_se": np.where(obs, se, np.nan),
        "lambda": lam,
        "lambda_estimated": lam_arg == "ml",
        "lambda_ci": lf.ci,
        "sigma2": float(R[0, 0]),
        "root": float(tc.root_mean[0]),
        "root_passes": float(tc.root_mean[0]),
        "t": t_quantile(n_o - 1, 0.5 + PI_LEVEL / 2),
        "flat": ft,
        "edges": edges,
        "Y": Y,
        "R": R,
    }


def _checked_entry(ds: Any, q: str) -> Any:
    """The catalogue entry of *q*; refuses unknown or possibly negative quantities."""
    cat = ds.catalog
    if q not in cat:
        raise UsageError(
            f"unknown quantity {q!r}: not in the catalogue (schema/quantities.toml "
            "or the dataset's comparo.toml)"
        )
    entry = cat[q]
    if entry.range is not None and entry.range[0] < 0:
        raise UsageError(
            f"{q} can be negative (catalogue range {list(entry.range)}): "
            "imputation works on log10 values and needs a positive quantity"
        )
    return entry


def _quantity_values(ds: Any, table: Any, q: str) -> tuple[dict, dict, str]:
    """Per-taxon values of a positive quantity *q* and their uncertainties (canonical
    unit), keyed by taxon; the unit."""
    entry = _checked_entry(ds, q)
    if q not in table.columns:
        raise UsageError(f"no taxon has a value of {q}: nothing to impute from")
    vals = table[["taxon", q] + ([f"{q}_u"] if f"{q}_u" in table.columns else [])].copy()
    vals = vals[np.isfinite(vals[q].to_numpy(dtype=float))]
    bad = vals[vals[q] <= 0]
    if len(bad):
        shown = ", ".join(f"{t} ({v:g})" for t, v in zip(bad["taxon"][:5], bad[q][:5], strict=True))
        raise UsageError(
            f"{q} has values <= 0 ({shown}): imputation works on log10 values "
            "and needs positive values"
        )
    taxa = vals["taxon"].astype(str).tolist()
    value_of = dict(zip(taxa, vals[q].to_numpy(dtype=float).tolist(), strict=True))
    u_col = vals[f"{q}_u"].to_numpy(dtype=float) if f"{q}_u" in vals else np.full(len(vals), np.nan)
    return value_of, dict(zip(taxa, u_col.tolist(), strict=True)), entry.unit


def _with_list(y: str, with_: Any) -> tuple[str, ...]:
    if with_ is None:
        return ()
    items = with_.split(",") if isinstance(with_, str) else list(with_)
    out = tuple(dict.fromkeys(str(q).strip() for q in items if str(q).strip()))
    if y in out:
        raise UsageError(f"--with lists {y}, the quantity imputed: list other quantities")
    return out


def impute(dataset: Any, y: str, lambda_: Any = "ml", with_: Any = None) -> Imputation:
    """Impute quantity *y* for every tip of the dataset's tree that has no value of it.

    Parameters
    ----------
    dataset : Dataset or path
        A loaded dataset (:func:`comparo.load`) or its folder; it needs a tree.
    y : str
        Catalogue key of a positive quantity; the per-taxon values (canonical unit,
        :func:`comparo.tabulate`) are modelled on the log10 scale.
    lambda_ : 'ml' or float
        Pagel's lambda: estimated by ML (default) or fixed in [0, 1].
    with_ : list of str or comma-separated str, optional
        Correlated positive quantities (log10 too): the prediction is the conditional
        expectation under multivariate Brownian motion given every observed value of
        every trait (:func:`impute_tree_with`). None or empty: relatives only.

    Returns
    -------
    Imputation
        Observed and imputed values (canonical unit), log10 values with their SE, 95%
        prediction intervals (Student t, n_observed - 1 df), and the leave-one-out check.

    Raises
    ------
    UsageError
        Unknown or non-positive quantity, no tree, fewer than :data:`MIN_OBSERVED`
        observed taxa on the tree.
    """
    from comparo.curation.aggregation import per_taxon
    from comparo.phylo.tips import dataset_tree_labels, match_labels
    from comparo.phylo.trees import as_topo
    from comparo.validation.dataset import load

    ds = load(dataset) if isinstance(dataset, str | Path) else dataset
    withs = _with_list(y, with_)
    for q in (y, *withs):
        _checked_entry(ds, q)
    if ds.tree is None:
        raise UsageError("imputation needs a tree: put tree.nwk in the dataset folder")
    table = per_taxon(ds)
    value_of, u_of, unit = _quantity_values(ds, table, y)
    others = [_quantity_values(ds, table, q)[0] for q in withs]
    topo = as_topo(ds.tree)
    labels = dataset_tree_labels(ds.taxa, topo.tips)
    match = match_labels(topo, sorted(set(table["taxon"].astype(str).tolist())), labels)
    tip_of = match.tip_of
    name_of = {tip: acc for acc, tip in labels.items()}  # taxa.csv rows naming tips
    name_of.update({tip: lab for lab, tip in tip_of.items()})

    def logs_of(values: dict) -> dict:
        return {tip_of[t]: math.log10(v) for t, v in values.items() if t in tip_of}

    without = tuple(sorted(t for t in value_of if t not in tip_of))
    if withs:
        r = impute_tree_with(topo, logs_of(value_of), [logs_of(o) for o in others], lambda_)
    else:
        r = impute_tree(topo, logs_of(value_of), lambda_)
    return _assemble(y, unit, r, name_of, value_of, u_of, without, withs)


def _assemble(y, unit, r, name_of, value_of, u_of, without, withs) -> Imputation:
    """The result from the engine's tip arrays: taxon names, observed values as given
    (with their uncertainty on log10 to first order), intervals, the leave-one-out check."""
    all_names = [name_of.get(tip, tip) for tip in r["tips"]]
    idx = np.lexsort((np.array(all_names, dtype=str), ~r["observed"]))  # observed first, by name
    names = [all_names[i] for i in idx]
    obs = r["observed"][idx]
    lv = r["log_value"][idx]
    # observed: the values as given, their measurement uncertainty on the log10 scale to
    # first order, u / (v ln 10), NaN without one; imputed: the prediction
    pairs = list(zip(names, obs, strict=True))
    given = np.array([value_of.get(nm, np.nan) if o else np.nan for nm, o in pairs])
    u = np.array([u_of.get(nm, np.nan) if o else np.nan for nm, o in pairs])
    with np.errstate(invalid="ignore", divide="ignore"):
        meas_se = np.where(u > 0, u / (given * math.log(10)), np.nan)
    se = np.where(obs, meas_se, r["log_se"][idx])
    tq = r["t"]
    value = np.where(obs, given, 10.0**lv)
    lo = np.where(obs, np.nan, 10.0 ** (lv - tq * se))
    hi = np.where(obs, np.nan, 10.0 ** (lv + tq * se))
    loo, loo_se = r["loo_log_value"][idx], r["loo_log_se"][idx]
    resid = (lv - loo)[obs]
    rmse = float(np.sqrt(np.mean(resid**2)))
    coverage = float(np.mean(np.abs(resid) <= tq * loo_se[obs]))
    return Imputation(
        y,
        unit,
        r["lambda"],
        r["lambda_estimated"],
        r["lambda_ci"],
        r["sigma2"],
        r["root"],
        tuple(names),
        obs,
        lv,
        se,
        value,
        lo,
        hi,
        loo,
        loo_se,
        rmse,
        coverage,
        without,
        tuple(withs),
        r.get("R"),
        {**r, "order": idx},
    )
