"""The linear-time engine: one post-order pass giving ln|V|, 1'V^-1 1, 1'V^-1 Z and
Z'V^-1 Z without building the n x n covariance.

Ho LST, Ané C (2014) A linear-time algorithm for Gaussian and non-Gaussian trait
evolution models. Syst Biol 63:397-408.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from comparo.base.errors import InputError, Problem
from comparo.phylo.flat import FlatTree


@dataclass(frozen=True, eq=False)
class GLSQuantities:
    """Root values of the linear-time pass for V (the covariance given by the edges).

    Attributes
    ----------
    logdet : float
        ln|V|.
    p : float
        1'V⁻¹1.
    q : numpy array (m,)
        1'V⁻¹Z.
    W : numpy array (m, m) or (m,)
        Z'V⁻¹Z (only its diagonal when computed with ``diag_only``).
    """

    logdet: float
    p: float
    q: np.ndarray
    W: np.ndarray


def gls_quantities(
    ft: FlatTree, Z: np.ndarray, edges: np.ndarray | None = None, *, diag_only: bool = False
) -> GLSQuantities:
    """ln|V|, 1'V⁻¹1, 1'V⁻¹Z and Z'V⁻¹Z in one post-order pass, O(n·m²).

    V is the BM covariance of the tree whose edge lengths are *edges* (default:
    the tree's own, i.e. V = C). Measurement-error variances and rate scaling are
    applied by the caller through *edges* (tip edge = sigma²·t_i + se_i²).

    Parameters
    ----------
    ft : FlatTree
        Tree; tip i is row i of Z.
    Z : array (n_tips, m)
        Columns (e.g. [X | y]).
    edges : array (n_nodes,), optional
        Edge lengths; tip edges must be > 0.
    diag_only : bool
        Only the diagonal of Z'V⁻¹Z (lets thousands of columns, e.g. permutations, share one pass).

    Notes
    -----
    Ho & Ané (2014, Syst Biol 63:397-408), post-order with t the edge above a node.
    Tip: L = ln t, p = 1/t, q = z/t, W = z'z/t. Internal node: sum over children,
    then, if t > 0, d = 1 + t·p, L += ln d, W -= t·q'q/d, q /= d, p /= d (the
    Sherman-Morrison update for adding t·11' to the covariance of the clade).
    At the root L = ln|V|. Nodes of one level are updated together with numpy and
    summed into their parents with ``np.add.reduceat``: the Python loop runs once per level.
    """
    Z = np.asarray(Z, dtype=float)
    if Z.ndim == 1:
        Z = Z[:, None]
    n, m = Z.shape
    if n != ft.n_tips:
        raise ValueError(f"Z has {n} rows for a tree of {ft.n_tips} tips")
    t = ft.length if edges is None else np.asarray(edges, dtype=float)
    N = ft.n_nodes
    tt = t[:n]
    if np.any(~(tt > 0)):
        bad = [ft.tips[i] for i in np.flatnonzero(~(tt > 0))[:5]]
        raise InputError(
            [
                Problem(
                    "error",
                    "tree",
                    None,
                    None,
                    bad[0],
                    "tree-zero-tip",
                    f"tip edge(s) of length 0 ({', '.join(bad)}): the tip variance is 0 and the "
                    "covariance cannot be inverted this way",
                    "give tip edges a positive length, use lambda < 1, or add measurement error",
                )
            ]
        )
    # W is symmetric: only its upper triangle (row-major) is carried, or only its diagonal
    iu, ju = (np.arange(m), np.arange(m)) if diag_only else np.triu_indices(m)
    w = iu.size
    S = np.zeros((N, 2 + m + w))  # packed per-node state: L, p, q (m), W (w)
    S[:n, 0] = np.log(tt)
    S[:n, 1] = 1.0 / tt
    S[:n, 2 : 2 + m] = Z / tt[:, None]
    S[:n, 2 + m :] = Z[:, iu] * Z[:, ju] / tt[:, None]
    bounds = ft.bounds
    for k in range(len(bounds) - 1):
        a, b = int(bounds[k]), int(bounds[k + 1])
        blk = S[a:b]
        if k > 0:
            te = t[a:b]
            d = 1.0 + te * blk[:, 1]
            blk[:, 0] += np.log(d)
            qa = blk[:, 2 : 2 + m]
            c = (te / d)[:, None]
            blk[:, 2 + m :] -= c * (qa * qa if diag_only else qa[:, iu] * qa[:, ju])
            blk[:, 1 : 2 + m] /= d[:, None]
        if k < len(bounds) - 2:
            starts, parents = ft.segments[k]
            S[parents] += np.add.reduceat(blk, starts, axis=0)
    root = S[N - 1]
    Wr = root[2 + m :].copy()
    if not diag_only:
        full = np.empty((m, m))
        full[iu, ju] = Wr
        full[ju, iu] = Wr
        Wr = full
    return GLSQuantities(float(root[0]), float(root[1]), root[2 : 2 + m].copy(), Wr)
