"""The (pruned) tree as flat numpy arrays, nodes grouped by height above the tips; Pagel's
lambda on the edges.

Pagel M (1999) Inferring the historical patterns of biological evolution.
Nature 401:877-884.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from comparo.errors import UsageError
from comparo.phylo.trees import _as_topo, _Topo


@dataclass(frozen=True, eq=False)
class FlatTree:
    """A rooted tree as flat numpy arrays, nodes sorted by height above the tips.

    Node ``i`` has parent ``parent[i]`` (-1 at the root) and the edge above it has
    length ``length[i]`` (0 at the root: a root edge is ignored). Tips are nodes
    ``0 .. n_tips-1`` in the order of ``tips`` (data rows must follow it: see
    :meth:`index`); the root is the last node. Nodes of level ``k`` (edges on the
    longest path down to a tip) are the slice ``bounds[k]:bounds[k+1]``; every
    parent has a higher level than its children, so a loop over levels is a
    post-order pass. Within a level, children of one parent are contiguous;
    ``segments[k]`` holds (start offsets, parents) of those runs. Unary nodes are removed (their
    edge is added to the child's), so every internal node has >= 2 children.

    Attributes
    ----------
    tips : tuple of str
        Tip labels.
    parent, length, bounds : numpy arrays
        See above; ``length`` in branch-length units.
    root_dist : numpy array
        Distance from the root to each node (branch-length units).
    order : numpy array
        Pre-order rank of each node in the source tree (keeps child order).
    """

    tips: tuple[str, ...]
    parent: np.ndarray
    length: np.ndarray
    bounds: np.ndarray
    root_dist: np.ndarray
    order: np.ndarray
    segments: tuple = ()

    def index(self, labels: Sequence[str]) -> np.ndarray:
        """Positions in :attr:`tips` of *labels* (to put data in tip order)."""
        where = {t: i for i, t in enumerate(self.tips)}
        return np.array([where[str(lab)] for lab in labels], dtype=np.int64)

    @property
    def n_tips(self) -> int:
        return len(self.tips)

    @property
    def n_nodes(self) -> int:
        return int(self.parent.size)

    @property
    def is_tip(self) -> np.ndarray:
        out = np.zeros(self.n_nodes, dtype=bool)
        out[: self.n_tips] = True
        return out

    @property
    def tip_dist(self) -> np.ndarray:
        """Root-to-tip distances, the diagonal of the BM covariance C."""
        return self.root_dist[: self.n_tips]

    def covariance(self) -> np.ndarray:
        """Dense BM covariance C (n x n), C_ij = root-to-MRCA(i, j) distance.

        For checks on small trees only: O(n²) memory.
        """
        n = self.n_tips
        anc = [self._ancestors(i) for i in range(n)]
        C = np.empty((n, n))
        for i in range(n):
            ai = anc[i]
            for j in range(i, n):
                common = ai & anc[j]
                C[i, j] = C[j, i] = max(self.root_dist[k] for k in common)
        return C

    def _ancestors(self, i: int) -> set[int]:
        out = set()
        while i >= 0:
            out.add(i)
            i = int(self.parent[i])
        return out


def flat_tree(tree: Any, tips: Sequence[str] | None = None) -> FlatTree:
    """Flatten a dendropy tree, keeping only *tips* (all tips when None).

    Tips not kept are pruned; unary nodes left behind are merged into their child
    (edge lengths add); if the root becomes unary, the new root is the most recent
    common ancestor of the kept tips and the edge above it is dropped. The kept
    tips are reordered (``FlatTree.tips``; use :meth:`FlatTree.index` to align data).

    Raises
    ------
    UsageError
        A requested tip is not in the tree, or fewer than 2 tips are kept.
    """
    return _flat(_as_topo(tree), tips)


def _flat(topo: _Topo, tips: Sequence[str] | None) -> FlatTree:
    par_l = topo.parent
    m = len(par_l)
    ln_l = [0.0 if v is None else float(v) for v in topo.length]
    leaf_label = topo.leaf
    by_label = {lab: i for i, lab in leaf_label.items()}
    if tips is None:
        tips = [leaf_label[i] for i in sorted(leaf_label)]
    tips = [str(t) for t in tips]
    absent = [t for t in tips if t not in by_label]
    if absent:
        raise UsageError(f"tip(s) not in the tree: {', '.join(absent[:10])}")
    if len(set(tips)) < 2:
        raise UsageError("fewer than 2 tips of the tree are kept: no tree-based fit is possible")
    keep_tip = np.zeros(m, dtype=bool)
    keep_tip[[by_label[t] for t in tips]] = True
    # kept children counts, post-order (reverse pre-order)
    n_kept_child = [0] * m
    kept_l = keep_tip.tolist()
    for i in range(m - 1, 0, -1):
        if kept_l[i]:
            p = par_l[i]
            n_kept_child[p] += 1
            kept_l[p] = True
    tip_l = keep_tip.tolist()
    ret_l = [k and (t or c >= 2) for k, t, c in zip(kept_l, tip_l, n_kept_child, strict=True)]
    # nearest retained ancestor-or-self (anc) and path length below it (off), pre-order
    anc_l = [-1] * m
    off_l = [0.0] * m
    np_l = [-1] * m
    nl_l = [0.0] * m
    if ret_l[0]:
        anc_l[0] = 0
    for i in range(1, m):
        if not kept_l[i]:
            continue
        p = par_l[i]
        if ret_l[i]:
            np_l[i] = anc_l[p]
            nl_l[i] = (off_l[p] + ln_l[i]) if anc_l[p] >= 0 else 0.0
            anc_l[i], off_l[i] = i, 0.0
        else:
            anc_l[i] = anc_l[p]
            off_l[i] = off_l[p] + ln_l[i] if anc_l[p] >= 0 else 0.0
    old = [i for i in range(m) if ret_l[i]]  # pre-order among retained nodes
    pos = {o: k for k, o in enumerate(old)}
    r = len(old)
    rpar = [pos[np_l[o]] if np_l[o] >= 0 else -1 for o in old]
    rlen = [nl_l[o] for o in old]
    if sum(1 for x in rpar if x < 0) != 1:  # pragma: no cover - guaranteed by construction
        raise RuntimeError("pruned tree has no unique root")
    level = [0] * r
    for k in range(r - 1, 0, -1):
        p = rpar[k]
        if level[k] + 1 > level[p]:
            level[p] = level[k] + 1
    dist = [0.0] * r
    for k in range(1, r):
        dist[k] = dist[rpar[k]] + rlen[k]
    # layout: level by level from the root down; within a level, nodes sorted by
    # their parent's position (children of one parent are contiguous)
    level_a = np.asarray(level)
    rpar_a = np.asarray(rpar, dtype=np.int64)
    top = int(level_a.max())
    counts = np.bincount(level_a, minlength=top + 1)
    bounds = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    by_level = np.argsort(level_a, kind="stable")
    pos = np.empty(r, dtype=np.int64)
    for k in range(top, -1, -1):
        idx = by_level[bounds[k]:bounds[k + 1]]
        if k < top:
            idx = idx[np.argsort(pos[rpar_a[idx]], kind="stable")]
        pos[idx] = np.arange(bounds[k], bounds[k + 1])
    perm = np.empty(r, dtype=np.int64)
    perm[pos] = np.arange(r)  # new position -> retained index
    parent = np.where(rpar_a[perm] >= 0, pos[np.maximum(rpar_a[perm], 0)], -1)
    length = np.asarray(rlen)[perm]
    length[parent < 0] = 0.0
    segments = []
    for k in range(top + 1):
        pa = parent[bounds[k]:bounds[k + 1]]
        starts = np.concatenate([[0], np.flatnonzero(np.diff(pa)) + 1]).astype(np.int64)
        segments.append((starts, pa[starts]))
    old_a = np.asarray(old)
    labels_by_old = [leaf_label[o] for o in old_a[perm[: len(tips)]].tolist()]
    return FlatTree(
        tips=tuple(labels_by_old),
        parent=parent.astype(np.int64),
        length=length,
        bounds=bounds,
        root_dist=np.asarray(dist)[perm],
        order=old_a[perm],
        segments=tuple(segments),
    )


def pagel_edges(ft: FlatTree, lam: float) -> np.ndarray:
    """Edge lengths of the Pagel-lambda tree.

    Internal edges are multiplied by lambda; a tip edge t_i becomes
    lambda·t_i + (1 - lambda)·C_ii, so root-to-tip distances are kept and
    C(lambda) = lambda·C + (1 - lambda)·diag(C) also for non-ultrametric trees
    (Pagel 1999, Nature 401:877-884; Freckleton et al. 2002, Am Nat 160:712-726).
    """
    if not 0.0 <= lam <= 1.0:
        raise UsageError(f"Pagel's lambda must be in [0, 1], got {lam}")
    e = ft.length * lam
    n = ft.n_tips
    e[:n] = lam * ft.length[:n] + (1.0 - lam) * ft.root_dist[:n]
    return e
