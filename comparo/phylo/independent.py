"""Felsenstein's independent contrasts with diagnostics.

Felsenstein J (1985) Phylogenies and the comparative method. Am Nat 125:1-15.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.errors import InputError, Problem, UsageError
from comparo.base.jsonsafe import finite_list as _fl
from comparo.base.jsonsafe import finite_or_none as _f
from comparo.base.results import Result
from comparo.phylo.flat import FlatTree, flat
from comparo.phylo.tips import TipMatch, match_labels
from comparo.phylo.trees import as_topo

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


def values_on_tree(
    tree: Any, values: Mapping[str, float]
) -> tuple[FlatTree, np.ndarray, TipMatch, list[str], list[str]]:
    """Flat tree pruned to the tips with finite values; the values in tip order; the
    match; labels with non-finite values; pruned tips."""
    import pandas as pd

    from comparo.base.arguments import check_kind

    check_kind(
        values,
        (Mapping, pd.Series),
        "values",
        "a mapping of tip label to value (a dict or a pandas Series)",
    )
    topo = as_topo(tree)
    labels = [str(k) for k in values]
    vals = {str(k): float(v) for k, v in values.items()}
    match = match_labels(topo, labels, None)
    pairs = [(a, b) for a, b, _ in match.pairs if math.isfinite(vals[a])]
    missing = [a for a, _, _ in match.pairs if not math.isfinite(vals[a])]
    if len(pairs) < 3:
        raise UsageError(f"{len(pairs)} values match tips of the tree; at least 3 are needed")
    ft = flat(topo, [b for _, b in pairs])
    used = set(ft.tips)
    pruned = [t for t in topo.tips if t not in used]
    label_of = {b: a for a, b in pairs}
    return ft, np.array([vals[label_of[t]] for t in ft.tips]), match, missing, pruned


@dataclass(frozen=True, eq=False)
class Contrasts(Result):
    """Standardised independent contrasts (Felsenstein 1985) and their diagnostics.

    Attributes
    ----------
    contrasts : numpy array (n-1,)
        u = (x_first - x_second)/sqrt(v_first + v_second), one per binary node
        (trait units / sqrt(branch-length unit)).
    sd : numpy array
        sqrt(v_first + v_second), the contrast's standard deviation under BM with
        unit rate (sqrt(branch-length unit)).
    node_height : numpy array
        Height of the contrast's node: the largest root-to-tip distance minus the
        node's distance from the root (its age on an ultrametric tree), branch-length units.
    root_value, root_variance : float
        Root estimate (= the GLS mean under BM) and its extra variance (times sigma²).
    r_abs_sd, p_abs_sd : float
        Pearson correlation of |u| with sd, and its p: a standardisation check
        (Garland, Harvey & Ives 1992, Syst Biol 41:18-32): it should be near 0.
    r_abs_height, p_abs_height : float
        Pearson correlation of |u| with node height, and its p: near 0 under BM; a
        trend suggests the rate of evolution changed through time.
    tips_used, taxa_without_tips, tips_pruned : tuple of str
    """

    contrasts: np.ndarray
    sd: np.ndarray
    node_height: np.ndarray
    root_value: float
    root_variance: float
    r_abs_sd: float
    p_abs_sd: float
    r_abs_height: float
    p_abs_height: float
    tips_used: tuple[str, ...] = field(default=())
    taxa_without_tips: tuple[str, ...] = field(default=())
    tips_pruned: tuple[str, ...] = field(default=())

    def to_frame(self) -> pd.DataFrame:
        """One row per contrast: ``contrast``, ``sd`` and ``node_height``."""
        import pandas as pd

        return pd.DataFrame(
            {"contrast": self.contrasts, "sd": self.sd, "node_height": self.node_height}
        )

    def to_dict(self) -> dict:
        """JSON-safe dict: the three arrays as lists, the root and the diagnostics."""
        return {
            "contrasts": _fl(self.contrasts),
            "sd": _fl(self.sd),
            "node_height": _fl(self.node_height),
            "root_value": _f(self.root_value),
            "root_variance": _f(self.root_variance),
            "r_abs_sd": _f(self.r_abs_sd),
            "p_abs_sd": _f(self.p_abs_sd),
            "r_abs_height": _f(self.r_abs_height),
            "p_abs_height": _f(self.p_abs_height),
            "tips_used": list(self.tips_used),
            "taxa_without_tips": list(self.taxa_without_tips),
            "tips_pruned": list(self.tips_pruned),
        }

    def summary(self) -> str:
        """Plain text: the count, the root value and the two diagnostic correlations."""
        lines = [
            f"{self.contrasts.size} standardised contrasts; root value {self.root_value:.6g}",
            f"|contrast| vs sd: r = {self.r_abs_sd:.3f} (p = {self.p_abs_sd:.3g})"
            + (
                "  <- contrasts not well standardised; consider transforming branch lengths"
                if self.p_abs_sd < 0.05
                else ""
            ),
            f"|contrast| vs node height: r = {self.r_abs_height:.3f} (p = {self.p_abs_height:.3g})",
        ]
        if self.taxa_without_tips:
            lines.append("not in the tree: " + ", ".join(self.taxa_without_tips))
        if self.tips_pruned:
            lines.append(f"{len(self.tips_pruned)} tips without values pruned")
        return "\n".join(lines)


def _pearson(a: np.ndarray, b: np.ndarray) -> tuple[float, float]:
    from scipy.stats import pearsonr

    if a.size < 3 or np.ptp(a) == 0 or np.ptp(b) == 0:
        return math.nan, math.nan
    r = pearsonr(a, b)
    return float(r.statistic), float(r.pvalue)


def contrasts(tree: Any, values: Mapping[str, float]) -> Contrasts:
    """Phylogenetically independent contrasts (Felsenstein 1985, Am Nat 125:1-15).

    Parameters
    ----------
    tree : dendropy.Tree or str
    values : dict label -> value
        Trait values (on the scale to be analysed, e.g. lg). Labels are matched to
        tips by :func:`match_tips`; tips without values are pruned.

    Returns
    -------
    Contrasts

    Notes
    -----
    Post-order: sisters with values x_i, x_j and (extended) edges v_i, v_j give
    u = (x_i - x_j)/sqrt(v_i + v_j); the node takes (x_i/v_i + x_j/v_j)/(1/v_i + 1/v_j)
    and its edge grows by v_i·v_j/(v_i + v_j). A polytomy is resolved, in child
    order, as a ladder of zero-length edges ((c1, c2), c3)...; n - 1 contrasts.
    The same child order is used for every trait, so contrasts of x and y pair up:
    the regression through the origin of y-contrasts on x-contrasts gives the
    BM-GLS slope (Garland & Ives 2000, Am Nat 155:346-364), and the root value is
    the GLS mean.
    """
    ft, yv, match, missing, pruned = values_on_tree(tree, values)
    n, N = ft.n_tips, ft.n_nodes
    children: list[list[int]] = [[] for _ in range(N)]
    for c in np.argsort(ft.order, kind="stable").tolist():  # pre-order = the source's child order
        p = int(ft.parent[c])
        if p >= 0:
            children[p].append(c)
    val = np.zeros(N)
    ext = np.zeros(N)  # extension of each node's edge
    val[:n] = yv
    u_list, sd_list, h_list = [], [], []
    tmax = float(ft.tip_dist.max())
    for k in range(n, N):  # nodes sorted by level: children before parents
        ch = children[k]
        x1, v1 = val[ch[0]], ft.length[ch[0]] + ext[ch[0]]
        for c in ch[1:]:
            x2, v2 = val[c], ft.length[c] + ext[c]
            s = v1 + v2
            if s <= 0:
                raise InputError(
                    [
                        Problem(
                            "error",
                            "tree",
                            None,
                            None,
                            None,
                            "tree-zero-contrast",
                            "two sister lineages with total length 0: a contrast is undefined",
                        )
                    ]
                )
            u_list.append((x1 - x2) / math.sqrt(s))
            sd_list.append(math.sqrt(s))
            h_list.append(tmax - float(ft.root_dist[k]))
            x1 = (x1 * v2 + x2 * v1) / s
            v1 = v1 * v2 / s  # joined node, zero-length edge above it within a polytomy
        val[k] = x1
        ext[k] = v1  # ft.length[k] is added when the parent uses it
    u = np.asarray(u_list)
    sd = np.asarray(sd_list)
    h = np.asarray(h_list)
    r1, p1 = _pearson(np.abs(u), sd)
    r2, p2 = _pearson(np.abs(u), h)
    return Contrasts(
        u,
        sd,
        h,
        float(val[N - 1]),
        float(ext[N - 1]),
        r1,
        p1,
        r2,
        p2,
        tuple(ft.tips),
        tuple(match.taxa_without_tips) + tuple(missing),
        tuple(pruned),
    )
