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

from comparo.base.errors import UsageError
from comparo.phylo.trees import Topo, as_topo


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
    return flat(as_topo(tree), tips)


def _up(
    par: np.ndarray, w: np.ndarray, stop: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """For every node, its nearest proper ancestor in *stop* (-1 when none; every
    ancestor when *stop* is None means the search runs to the root, so -1) and the sum
    of *w* over the edges up to it, by pointer jumping: about log2(depth) numpy passes."""
    anc = par.copy()
    d = w.astype(float, copy=True)
    while True:
        move = anc >= 0
        if stop is not None:
            move[move] = ~stop[anc[move]]
        if not move.any():
            return anc, d
        up = anc[move]
        d[move] += d[up]
        anc[move] = anc[up]


def _subtree_end(par: np.ndarray) -> np.ndarray:
    """One past the last descendant of each node, for pre-order *par* (a subtree is
    the range [i, end[i])): the last child's last descendant, by pointer jumping."""
    m = par.size
    last = np.arange(m)
    np.maximum.at(last, par[1:], np.arange(1, m))
    while True:
        nxt = last[last]
        if np.array_equal(nxt, last):
            return last + 1
        last = nxt


def _range_max(a: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """max(a[lo[k]:hi[k]]) for non-empty ranges, with a sparse table (O(m log m))."""
    table = [a]
    span = 1
    while 2 * span <= a.size:
        prev = table[-1]
        table.append(np.maximum(prev[:-span], prev[span:]))
        span *= 2
    length = hi - lo
    k = np.floor(np.log2(length)).astype(np.int64)
    k = np.where((1 << (k + 1)) <= length, k + 1, k)  # guard the float log at powers of two
    k = np.where((1 << k) > length, k - 1, k)
    out = np.empty(lo.size, dtype=a.dtype)
    for j in np.unique(k).tolist():
        sel = np.flatnonzero(k == j)
        t = table[j]
        out[sel] = np.maximum(t[lo[sel]], t[hi[sel] - (1 << j)])
    return out


def flat(topo: Topo, tips: Sequence[str] | None) -> FlatTree:
    """Prune and flatten in numpy over the pre-order arrays (pointer jumping for the
    root-ward sums, pre-order ranges for the subtrees): no loop over nodes in Python."""
    par = np.asarray(topo.parent, dtype=np.int64)
    m = par.size
    ln = np.array(topo.length, dtype=float)  # None (no length written) reads as nan
    ln[np.isnan(ln)] = 0.0
    ln[0] = 0.0
    by_label = topo.node_of
    tips = list(topo.tips) if tips is None else [str(t) for t in tips]
    where = [by_label.get(t, -1) for t in tips]
    if -1 in where:
        absent = [t for t, i in zip(tips, where, strict=True) if i < 0]
        raise UsageError(f"tip(s) not in the tree: {', '.join(absent[:10])}")
    if len(set(tips)) < 2:
        raise UsageError("fewer than 2 tips of the tree are kept: no tree-based fit is possible")
    keep_tip = np.zeros(m, dtype=bool)
    keep_tip[where] = True
    # kept: the subtree holds a kept tip; retained: a kept tip, or >= 2 kept children
    end = _subtree_end(par)
    cs = np.concatenate([[0], np.cumsum(keep_tip)])
    kept = cs[end] > cs[:-1]
    n_kept_child = np.bincount(par[1:][kept[1:]], minlength=m)
    ret = kept & (keep_tip | (n_kept_child >= 2))
    # nearest retained proper ancestor and the path length up to it
    anc, off = _up(par, ln, ret)
    old = np.flatnonzero(ret)  # pre-order among retained nodes
    r = old.size
    new_of = np.cumsum(ret) - 1
    up = anc[old]
    rpar_a = np.where(up >= 0, new_of[np.maximum(up, 0)], -1).astype(np.int64)
    rlen = np.where(up >= 0, off[old], 0.0)
    if int(np.sum(rpar_a < 0)) != 1:  # pragma: no cover - guaranteed by construction
        raise RuntimeError("pruned tree has no unique root")
    # level = edges on the longest path down to a tip = max depth in the subtree - depth
    depth = _up(rpar_a, np.ones(r))[1].astype(np.int64)
    level_a = _range_max(depth, np.arange(r), _subtree_end(rpar_a)) - depth
    dist = _up(rpar_a, rlen)[1]
    # layout: level by level from the root down; within a level, nodes sorted by
    # their parent's position (children of one parent are contiguous)
    top = int(level_a.max())
    counts = np.bincount(level_a, minlength=top + 1)
    bounds = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    by_level = np.argsort(level_a, kind="stable")
    pos = np.empty(r, dtype=np.int64)
    for k in range(top, -1, -1):
        idx = by_level[bounds[k] : bounds[k + 1]]
        if k < top:
            idx = idx[np.argsort(pos[rpar_a[idx]], kind="stable")]
        pos[idx] = np.arange(bounds[k], bounds[k + 1])
    perm = np.empty(r, dtype=np.int64)
    perm[pos] = np.arange(r)  # new position -> retained index
    parent = np.where(rpar_a[perm] >= 0, pos[np.maximum(rpar_a[perm], 0)], -1)
    length = rlen[perm]
    length[parent < 0] = 0.0
    segments = []
    for k in range(top + 1):
        pa = parent[bounds[k] : bounds[k + 1]]
        starts = np.concatenate([[0], np.flatnonzero(np.diff(pa)) + 1]).astype(np.int64)
        segments.append((starts, pa[starts]))
    label_of = np.empty(m, dtype=object)
    label_of[where] = tips
    return FlatTree(
        tips=tuple(label_of[old[perm[: len(tips)]]].tolist()),
        parent=parent.astype(np.int64),
        length=length,
        bounds=bounds,
        root_dist=dist[perm],
        order=old[perm],
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
