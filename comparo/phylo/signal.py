"""Phylogenetic signal: Pagel's lambda and Blomberg's K with a permutation test.

Blomberg SP, Garland T, Ives AR (2003) Testing for phylogenetic signal in
comparative data: behavioral traits are more labile. Evolution 57:717-745.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.base.jsonsafe import finite_list as _fl
from comparo.base.jsonsafe import finite_or_none as _f
from comparo.base.results import Result
from comparo.phylo.engine import gls_quantities
from comparo.phylo.flat import FlatTree
from comparo.phylo.independent import values_on_tree
from comparo.phylo.likelihood import fit_lambda, lr

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


@dataclass(frozen=True)
class SignalResult(Result):
    """Phylogenetic signal of one trait.

    Attributes
    ----------
    n : int
        Tips used.
    K : float
        Blomberg's K (dimensionless; E[K] = 1 under BM on the tree).
    K_p : float
        Permutation p-value, (1 + #{K_perm >= K})/(permutations + 1).
    permutations, seed : int
    lambda_ : float
        ML Pagel's lambda of the intercept-only model.
    lambda_ci : (float, float)
        Profile-likelihood interval at *ci*.
    loglik : float
        Maximised log-likelihood.
    lr_lambda0, p_lambda0 : float
        LR statistic and chi²_1 p of lambda = 0 (no signal; conservative on the boundary).
    lr_lambda1, p_lambda1 : float
        The same for lambda = 1 (BM).
    taxa_without_tips, tips_pruned : tuple of str
    """

    n: int
    K: float
    K_p: float
    permutations: int
    seed: int | None
    lambda_: float
    lambda_ci: tuple[float, float]
    loglik: float
    lr_lambda0: float
    p_lambda0: float
    lr_lambda1: float
    p_lambda1: float
    taxa_without_tips: tuple[str, ...] = ()
    tips_pruned: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        return {
            "n": self.n,
            "K": _f(self.K),
            "K_p": _f(self.K_p),
            "permutations": self.permutations,
            "seed": self.seed,
            "lambda": _f(self.lambda_),
            "lambda_ci": _fl(self.lambda_ci),
            "loglik": _f(self.loglik),
            "lr_lambda0": _f(self.lr_lambda0),
            "p_lambda0": _f(self.p_lambda0),
            "lr_lambda1": _f(self.lr_lambda1),
            "p_lambda1": _f(self.p_lambda1),
            "taxa_without_tips": list(self.taxa_without_tips),
            "tips_pruned": list(self.tips_pruned),
        }

    def summary(self) -> str:
        """Plain text: K with its permutation p, lambda with its interval and LR tests."""
        lo, hi = self.lambda_ci
        return "\n".join(
            [
                f"phylogenetic signal, n = {self.n}",
                f"Blomberg's K = {self.K:.4g} (permutation p = {self.K_p:.3g}, "
                f"{self.permutations} permutations, seed {self.seed})",
                f"Pagel's lambda = {self.lambda_:.4g} [{lo:.3g}, {hi:.3g}];"
                f" LR vs 0: {self.lr_lambda0:.3g} (p = {self.p_lambda0:.3g});"
                f" vs 1: {self.lr_lambda1:.3g} (p = {self.p_lambda1:.3g})",
            ]
        )

    def to_frame(self) -> pd.DataFrame:
        """One row per statistic: ``statistic``, ``estimate``, ``ci_low``, ``ci_high``,
        ``test`` (what the p tests) and ``p``."""
        import pandas as pd

        nan = math.nan
        lo, hi = self.lambda_ci
        return pd.DataFrame(
            [
                ("K", self.K, nan, nan, "permutation, K >= observed", self.K_p),
                ("lambda", self.lambda_, lo, hi, "LR, lambda = 0", self.p_lambda0),
                ("lambda", self.lambda_, lo, hi, "LR, lambda = 1", self.p_lambda1),
            ],
            columns=["statistic", "estimate", "ci_low", "ci_high", "test", "p"],
        )


def blomberg_k(ft: FlatTree, Y: np.ndarray) -> np.ndarray:
    """Blomberg's K for each column of Y (n x m), from one linear-time pass.

    K = [(y - a)'(y - a) / ((y - a)'C⁻¹(y - a))] / [(tr C - n/1'C⁻¹1)/(n - 1)],
    a = 1'C⁻¹y / 1'C⁻¹1 (Blomberg, Garland & Ives 2003, Evolution 57:717-745);
    (y - a)'C⁻¹(y - a) = y'C⁻¹y - (1'C⁻¹y)²/1'C⁻¹1.
    """
    Y = np.asarray(Y, dtype=float)
    if Y.ndim == 1:
        Y = Y[:, None]
    n = Y.shape[0]
    gq = gls_quantities(ft, Y, diag_only=True)
    a = gq.q / gq.p
    num = ((Y - a) ** 2).sum(axis=0)
    den = gq.W - gq.q**2 / gq.p
    expected = (ft.tip_dist.sum() - n / gq.p) / (n - 1)
    return (num / den) / expected


def tree_signal(
    tree: Any,
    values: Mapping[str, float],
    permutations: int = 999,
    seed: int | None = 20240601,
    ci: float = 0.95,
) -> SignalResult:
    """Pagel's lambda (ML, with LR tests of 0 and 1) and Blomberg's K with a
    seeded permutation test (tip values shuffled; permutations share passes of
    the linear-time engine, in blocks of up to 512 columns).

    Parameters
    ----------
    tree : dendropy.Tree or str
    values : dict label -> value (on the analysed scale)
    permutations : int
        Number of shuffles for the K test (0: no test, K_p is NaN).
    seed : int
        Seed of ``numpy.random.default_rng``.
    ci : float
        Level of the lambda profile interval.

    References
    ----------
    Pagel M (1999) Nature 401:877-884. Blomberg SP, Garland T, Ives AR (2003)
    Evolution 57:717-745.
    """
    from comparo.base.arguments import check_count, check_level, check_permutations

    permutations = check_count(permutations, "permutations")
    ci = check_level(ci)
    ft, yv, match, missing, pruned = values_on_tree(tree, values)
    n = ft.n_tips
    permutations = check_permutations(permutations, n)
    K = float(blomberg_k(ft, yv)[0])
    pval = math.nan
    if permutations > 0:
        rng = np.random.default_rng(seed)
        hits = 0
        done = 0
        block = int(max(1, min(512, 10_000_000 // (2 * ft.n_nodes))))  # ~160 MB of state at most
        while done < permutations:
            m = min(block, permutations - done)
            Yp = rng.permuted(np.tile(yv, (m, 1)), axis=1).T
            hits += int(np.sum(blomberg_k(ft, Yp) >= K - 1e-12 * abs(K)))
            done += m
        pval = (1 + hits) / (permutations + 1)
    lf = fit_lambda(ft, np.ones((n, 1)), yv, "ml", None, False, ci)
    t0, t1 = lr(lf.loglik, lf.ll0), lr(lf.loglik, lf.ll1)
    return SignalResult(
        n,
        K,
        pval,
        int(permutations),
        seed,
        lf.lam,
        lf.ci,
        lf.loglik,
        t0["statistic"],
        t0["p"],
        t1["statistic"],
        t1["p"],
        tuple(match.taxa_without_tips) + tuple(missing),
        tuple(pruned),
    )
