"""A check of every observed per-taxon value against what its relatives predict: the
leave-one-out prediction of :mod:`comparo.phylo.imputation` (BM after Pagel's lambda, on
log10 of the values), its error standardised with the rate of the *other* taxa (the
externally studentised residual), and a Bonferroni threshold on Student's t.

A value typed in grams under a kilogram header is inside any plausible range for animals
but about 10^3 times what its relatives predict; this check finds it, a per-cell range
cannot. docs/methods/imputation.md ("A check against what relatives predict") gives the
formulas and the expected number of false alarms.

:func:`phylo_outliers` takes a dataset (and its per-taxon table or harmonised rows) and
returns a :class:`PhyloCheck`; :func:`outlier_problems` turns one into the warnings of
``comparo check``. The pipeline (:mod:`comparo.pipeline`) composes both into ``check`` and
the audit; no earlier room calls this module.

Belsley DA, Kuh E, Welsch RE (1980) Regression diagnostics. Wiley (the externally
studentised residual and its t distribution).
Cook RD, Weisberg S (1982) Residuals and influence in regression. Chapman & Hall.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.errors import Problem, UsageError
from comparo.base.jsonsafe import finite_or_none as _f

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

#: Fewest observed taxa on the tree for a quantity to be checked: below this, lambda by
#: ML and the rate of the other taxa are too unstable to call any value an outlier.
MIN_CHECKED = 10

#: Family-wise false-alarm rate per quantity (Bonferroni over its observed taxa): under
#: the model the expected number of false flags per quantity is at most this.
ALPHA = 0.05

#: Level of the predicted range shown with a flag.
RANGE_LEVEL = 0.95


def threshold(n: int, alpha: float = ALPHA) -> float:
    """|z| above which one of *n* observed values is flagged: the Student t quantile with
    n - 2 degrees of freedom at 1 - alpha/(2n) (two-sided Bonferroni over n tests)."""
    from comparo.base.quantiles import t_quantile

    return t_quantile(n - 2, 1.0 - alpha / (2.0 * n))


def loo_z(
    tree: Any, log_values: dict[str, float], lambda_: Any = "ml", *, alpha: float = ALPHA
) -> dict:
    """Leave-one-out z of every observed tip: (y - ŷ₋ᵢ) / (σ̂₋ᵢ·√vᵢ).

    ŷ₋ᵢ and vᵢ (the prediction and its variance for a unit rate, root estimated by GLS)
    are those of :func:`comparo.phylo.imputation.impute_tree`, lambda held at the
    full-data value; σ̂²₋ᵢ is the REML rate of the other n - 1 tips at that lambda,
    exactly, from σ̂²₋ᵢ = σ̂²(n - 1 - rᵢ²)/(n - 2), rᵢ the same error scaled by the
    full-data σ̂ (the case-deletion identity of GLS). Under the model with lambda known,
    z ~ t(n - 2).

    Returns a dict of arrays over the observed tips (in tree order): ``tips``, ``y``,
    ``pred`` (ŷ₋ᵢ), ``se`` (σ̂₋ᵢ·√vᵢ), ``z``; and ``n``, ``lambda``, ``sigma2`` (full data),
    ``threshold`` (:func:`threshold`), ``t_range`` (the t quantile of the predicted range).
    """
    from comparo.base.quantiles import t_quantile

    r = _loo(tree, log_values, lambda_)
    return {
        **r,
        "threshold": threshold(r["n"], alpha),
        "t_range": t_quantile(r["n"] - 2, 0.5 + RANGE_LEVEL / 2),
    }


def _loo(tree: Any, log_values: dict[str, float], lambda_: Any) -> dict:
    """:func:`loo_z` without the two t quantiles (each costs about a millisecond)."""
    from comparo.phylo.imputation import impute_tree

    r = impute_tree(tree, log_values, lambda_)
    obs = r["observed"]
    n = int(obs.sum())
    y = r["log_value"][obs]
    pred = r["loo_log_value"][obs]
    se_full = r["loo_log_se"][obs]
    with np.errstate(divide="ignore", invalid="ignore"):
        r_int = (y - pred) / se_full
        shrink = np.maximum(n - 1 - r_int**2, 0.0) / (n - 2)
        se = se_full * np.sqrt(shrink)
        z = (y - pred) / se
    tips = [r["tips"][i] for i in np.flatnonzero(obs)]
    return {
        "tips": tips,
        "y": y,
        "pred": pred,
        "se": se,
        "z": z,
        "n": n,
        "lambda": r["lambda"],
        "sigma2": r["sigma2"],
    }


def _flagged(z: np.ndarray, n: int, alpha: float) -> tuple[np.ndarray, float]:
    """Indices of |z| beyond :func:`threshold`, and the threshold. The t quantile is
    computed only when some |z| passes the normal quantile at the same level, which is
    below it (t quantiles exceed normal ones): on clean data it is rarely needed."""
    from statistics import NormalDist

    bound = NormalDist().inv_cdf(1.0 - alpha / (2.0 * n))
    if not np.any(np.abs(z) > bound):
        return np.array([], dtype=int), bound
    cut = threshold(n, alpha)
    return np.flatnonzero(np.abs(z) > cut), cut


@dataclass(frozen=True)
class PhyloCheck:
    """Observed values far from what relatives predict (see :func:`phylo_outliers`).

    Attributes
    ----------
    outliers : list of dict
        ``{"obs_id", "taxon", "quantity", "z"}``, one entry per obs_id behind a flagged
        per-taxon value (the per-taxon table's ``Q_obs``), by quantity then |z|.
    flagged : list of dict
        One per flagged per-taxon value: ``taxon``, ``quantity``, ``unit`` (canonical),
        ``value`` (in ``unit``), ``predicted`` (10^ŷ₋ᵢ, in ``unit``), ``range`` (95%
        prediction interval from the other taxa, in ``unit``), ``ratio`` (value/predicted),
        ``z``, ``threshold``, ``obs_ids``.
    checked : list of str
        Quantities checked.
    skipped : dict
        Quantity -> why it was not checked.
    note : str
        One sentence: what was checked, or why nothing was.
    """

    outliers: list[dict[str, Any]] = field(default_factory=list)
    flagged: list[dict[str, Any]] = field(default_factory=list)
    checked: list[str] = field(default_factory=list)
    skipped: dict[str, str] = field(default_factory=dict)
    note: str = ""

    def to_dict(self) -> dict[str, Any]:
        return {
            "phylo_outliers": self.outliers,
            "phylo_checked": self.checked,
            "phylo_skipped": self.skipped,
            "phylo_note": self.note,
        }


#: Powers of ten tried by :func:`hint`, most typical unit slips first (10^3: g for kg,
#: mm for m; 10^6: mg for kg; 10^2: cm for m; 10^1: mm for cm).
SLIP_POWERS = (3, 6, 2, 1)


def hint(value: float, low: float, high: float) -> str:
    """What a flagged *value* suggests to a curator, given the range [*low*, *high*] its
    relatives predict (same unit): the power of ten that would bring it into the range."""
    for p in SLIP_POWERS:
        for sign in (1, -1):
            if low <= value / 10.0 ** (sign * p) <= high:
                how = "divided" if sign > 0 else "multiplied"
                return (
                    f"{how} by 10^{p} it would lie in the predicted range: a unit slip "
                    "(g under a kg header, mm under m)? else check the source"
                )
    return "a typing slip, another muscle or preparation, or a real oddity: check the source"


def phylo_outliers(
    ds: Any,
    table: pd.DataFrame | None = None,
    *,
    alpha: float = ALPHA,
    harmonised: Any = None,
    temperature: bool = True,
) -> PhyloCheck:
    """Check every positive quantity with at least :data:`MIN_CHECKED` observed taxa on the
    dataset's tree against what relatives predict (:func:`loo_z`, lambda by ML).

    Parameters
    ----------
    ds : Dataset
        A loaded dataset; without a tree nothing is checked (the note says so).
    table : DataFrame, optional
        Its per-taxon table (:func:`comparo.tabulate`). When not given, computed (from
        *harmonised*, with *temperature*) for the quantities with at least
        :data:`MIN_CHECKED` taxa only.
    alpha : float
        Family-wise false-alarm rate per quantity.
    """
    if ds.tree is None:
        return PhyloCheck(note="no tree (tree.nwk): values are not checked against relatives")
    from comparo.base.quantiles import t_quantile
    from comparo.curation.aggregation import per_taxon
    from comparo.phylo.tips import dataset_tree_labels, match_labels
    from comparo.phylo.trees import as_topo

    skipped: dict[str, str] = {}
    if table is None:
        from dataclasses import replace

        from comparo.curation.harmonise import harmonise

        h = harmonised or harmonise(ds, temperature=temperature)
        used = h.rows[h.rows["status"] == "used"]
        n_taxa = used.groupby("quantity_key")["accepted"].nunique()
        for q, k in n_taxa[n_taxa < MIN_CHECKED].items():
            skipped[str(q)] = f"{k} taxa with a value (fewer than {MIN_CHECKED})"
        rows = h.rows[h.rows["quantity_key"].isin(n_taxa[n_taxa >= MIN_CHECKED].index)]
        table = per_taxon(ds, temperature=temperature, harmonised=replace(h, rows=rows))
    tab = table.copy(deep=False)
    tab.attrs = {}  # each column read would deep-copy the table's lineage otherwise
    try:
        topo = as_topo(ds.tree)
        labels = dataset_tree_labels(ds.taxa, topo.tips)
        tip_of = match_labels(topo, sorted(set(tab["taxon"].astype(str).tolist())), labels).tip_of
    except (UsageError, ValueError) as exc:
        return PhyloCheck(note=f"the tree could not be matched to the taxa ({exc}): not checked")
    cat = ds.catalog
    checked: list[str] = []
    flagged: list[dict[str, Any]] = []
    taxa = tab["taxon"].astype(str).to_numpy(object)
    for q in [c for c in tab.columns if c in cat]:
        entry = cat[q]
        if entry.range is not None and entry.range[0] < 0:
            skipped[q] = "can be negative (not on a log scale)"
            continue
        v = tab[q].to_numpy(dtype=float)
        have = np.isfinite(v)
        if np.any(v[have] <= 0):
            skipped[q] = "has values <= 0"
            continue
        on_tree = [i for i in np.flatnonzero(have) if taxa[i] in tip_of]
        if len(on_tree) < MIN_CHECKED:
            skipped[q] = f"{len(on_tree)} observed taxa on the tree (fewer than {MIN_CHECKED})"
            continue
        logs = {tip_of[taxa[i]]: math.log10(v[i]) for i in on_tree}
        try:
            r = _loo(topo, logs, "ml")
        except UsageError as exc:
            skipped[q] = str(exc)
            continue
        checked.append(q)
        row_of = {tip_of[taxa[i]]: i for i in on_tree}
        hits, cut = _flagged(r["z"], r["n"], alpha)
        ids = tab[f"{q}_obs"].astype(str).to_numpy(object) if f"{q}_obs" in tab else None
        t_range = t_quantile(r["n"] - 2, 0.5 + RANGE_LEVEL / 2) if hits.size else math.nan
        for j in hits:
            i = row_of[r["tips"][j]]
            pred, half = r["pred"][j], t_range * r["se"][j]
            obs_ids = [s for s in str(ids[i]).split(";") if s] if ids is not None else []
            flagged.append(
                {
                    "taxon": str(taxa[i]),
                    "quantity": q,
                    "unit": entry.unit,
                    "value": float(v[i]),
                    "predicted": float(10.0**pred),
                    "range": [float(10.0 ** (pred - half)), float(10.0 ** (pred + half))],
                    "ratio": float(v[i] / 10.0**pred),
                    "z": float(r["z"][j]),
                    "threshold": cut,
                    "obs_ids": obs_ids,
                }
            )
    flagged.sort(key=lambda f: (f["quantity"], -abs(f["z"])))
    outliers = [
        {"obs_id": o, "taxon": f["taxon"], "quantity": f["quantity"], "z": _f(f["z"])}
        for f in flagged
        for o in f["obs_ids"]
    ]
    note = (
        f"checked against relatives on the tree: {len(checked)} quantities (leave-one-out, "
        f"Bonferroni at {alpha:g} per quantity); not checked: {len(skipped)}"
        if checked
        else f"no quantity has {MIN_CHECKED} or more observed taxa on the tree: nothing checked"
    )
    return PhyloCheck(outliers, flagged, checked, skipped, note)


def outlier_problems(
    found: PhyloCheck, rows: pd.DataFrame, file_of: Callable[[str], str]
) -> list[Problem]:
    """The warnings ``comparo check`` prints for the values *found* far from what their
    relatives on the tree predict (rule ``phylo-outlier``, one per observation row): *rows*
    are the harmonised rows (``obs_id``, ``row``), *file_of* gives the file of an obs_id
    (:func:`comparo.curation.findings.problem_file`)."""
    from comparo.curation.harmonise import pretty_unit

    row_of = dict(zip(rows["obs_id"], rows["row"], strict=True))
    out: list[Problem] = []
    for f in found.flagged:
        unit = pretty_unit(f["unit"])
        lo, hi = f["range"]
        msg = (
            f"{f['quantity']} of {f['taxon']} = {f['value']:.4g} {unit} is {f['ratio']:.3g} times "
            f"what its relatives on the tree predict ({f['predicted']:.3g} {unit}, 95% range "
            f"{lo:.3g} to {hi:.3g}); leave-one-out z = {f['z']:.2f}, beyond {f['threshold']:.2f}"
        )
        for oid in f["obs_ids"]:
            row = row_of.get(oid)
            out.append(
                Problem(
                    "warning",
                    file_of(oid),
                    int(row) if row is not None else None,
                    "value",
                    oid,
                    "phylo-outlier",
                    msg,
                    hint(f["value"], lo, hi),
                )
            )
    return out
