"""Phylogenetic trees and Gaussian models on them, in linear time.

This module reads a Newick tree (with dendropy), matches its tips to the taxa
of a per-taxon table, and fits Brownian-motion (BM) models on the tree without
ever building the n x n covariance matrix:

* :func:`read_tree` -- Newick text or file to a ``dendropy.Tree`` (branch
  lengths required, deep trees supported);
* :func:`match_tips` -- table labels to tip labels, with both unmatched lists;
* :class:`FlatTree` -- the (pruned) tree as flat numpy arrays, nodes grouped by
  height above the tips;
* :func:`gls_quantities` -- one post-order pass giving ln|V|, 1'V⁻¹1, 1'V⁻¹Z and
  Z'V⁻¹Z (Ho & Ané 2014), vectorised by tree level;
* :func:`pgls_fit` -- phylogenetic generalised least squares with Pagel's lambda,
  measurement error, ML or REML, and group (interaction) tests;
* :func:`pic` -- Felsenstein's independent contrasts with diagnostics;
* :func:`signal` -- Pagel's lambda and Blomberg's K with a permutation test.

Units: branch lengths are in the tree's own units (time or expected change);
the BM rate sigma² is in (trait units on the fitted scale)² per branch-length
unit. Nothing here depends on the unit of the branch lengths except sigma².

References
----------
Felsenstein J (1985) Phylogenies and the comparative method. Am Nat 125:1-15.
Grafen A (1989) The phylogenetic regression. Phil Trans R Soc B 326:119-157.
Pagel M (1999) Inferring the historical patterns of biological evolution.
Nature 401:877-884.
Freckleton RP, Harvey PH, Pagel M (2002) Phylogenetic analysis and comparative
data: a test and review of evidence. Am Nat 160:712-726.
Blomberg SP, Garland T, Ives AR (2003) Testing for phylogenetic signal in
comparative data: behavioral traits are more labile. Evolution 57:717-745.
Ives AR, Midford PE, Garland T (2007) Within-species variation and measurement
error in phylogenetic comparative methods. Syst Biol 56:252-270.
Ho LST, Ané C (2014) A linear-time algorithm for Gaussian and non-Gaussian trait
evolution models. Syst Biol 63:397-408.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.errors import InputError, Problem, UsageError, problems_from_frame

if TYPE_CHECKING:  # pragma: no cover
    import dendropy
    import pandas as pd

__all__ = [
    "read_tree",
    "check_tree",
    "TipMatch",
    "match_tips",
    "FlatTree",
    "flat_tree",
    "GLSQuantities",
    "gls_quantities",
    "pagel_edges",
    "pgls_fit",
    "Contrasts",
    "pic",
    "SignalResult",
    "tree_signal",
    "blomberg_k",
    "random_newick",
]

_NEWICK_SOURCE = "<newick text>"


# --------------------------------------------------------------------------- helpers


def _f(v: Any) -> float | None:
    """A plain float, or None for NaN/inf/None (JSON-safe)."""
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def _fl(values: Any) -> list | None:
    if values is None:
        return None
    return [_f(v) for v in values]


def _tree_problem(file: str, rule: str, message: str, hint: str = "", value: str | None = None) -> InputError:
    return InputError([Problem("error", file, None, None, value, rule, message, hint)])


def _norm(label: str) -> str:
    """Matching key: underscores as spaces, runs of white space collapsed, case folded."""
    return " ".join(str(label).replace("_", " ").split()).casefold()


# --------------------------------------------------------------------------- reading


def _parse(text: str) -> Any:
    """Parse Newick *text* with dendropy (deep trees on a big stack): the one reader,
    shared with the dataset folder reader (:func:`comparo.io.parse_newick`)."""
    from comparo.io import parse_newick

    return parse_newick(text)


def read_tree(path_or_newick: str | Path) -> dendropy.Tree:
    """Read one rooted tree with branch lengths from a Newick file or string.

    Parameters
    ----------
    path_or_newick : str or Path
        A file name, or Newick text itself (recognised by its leading ``(`` or ``[``).
        A missing final ``;`` is tolerated.

    Returns
    -------
    dendropy.Tree
        Tip labels are kept as written (underscores are not turned into spaces);
        they are stored on the leaf nodes' ``label`` attribute.

    Raises
    ------
    InputError
        File missing or unreadable; malformed Newick (unbalanced parentheses,
        bad edge length...) with dendropy's line and column; more or fewer than
        one tree; a tip without a label; duplicate tip labels; an edge without
        a length or with a negative length (the root edge is ignored).

    Notes
    -----
    Polytomies, unary nodes and non-ultrametric trees are accepted. Very deep
    trees (ladders of 50,000 levels) parse on a thread with a larger stack.
    """
    from dendropy.utility.error import DataParseError

    src = str(path_or_newick)
    if src.lstrip().startswith(("(", "[")):
        name, text = _NEWICK_SOURCE, src
    else:
        name = src
        try:
            text = Path(src).read_text(encoding="utf-8-sig")
        except FileNotFoundError:
            raise _tree_problem(name, "tree-file", "tree file not found", "check the path given with --tree") from None
        except (OSError, UnicodeDecodeError) as exc:
            raise _tree_problem(name, "tree-file", f"cannot read the tree file ({exc})") from None
    text = text.strip()
    if text and not text.endswith(";"):
        text += ";"
    try:
        trees = _parse(text)
    except DataParseError as exc:
        raise _tree_problem(
            name, "tree-newick", f"malformed Newick: {exc}", "check parentheses, commas, ':' before each length and the final ';'"
        ) from None
    except RecursionError:  # pragma: no cover - guarded by _parse
        raise _tree_problem(name, "tree-newick", "tree nested too deeply to parse") from None
    if len(trees) != 1:
        raise _tree_problem(name, "tree-count", f"the file holds {len(trees)} trees; exactly one is needed")
    tree = trees[0]
    _check(_topology(tree), name)
    return tree


@dataclass(frozen=True, eq=False)
class _Topo:
    """One pre-order pass over a dendropy tree: parent index, edge length (None if
    absent) and, for leaves, the label (None if absent)."""

    parent: list[int]
    length: list[float | None]
    leaf: dict[int, str | None]
    inner_label: list[str | None]

    @property
    def tips(self) -> list[str]:
        return [str(v) for v in self.leaf.values()]


def _topology(tree: Any) -> _Topo:
    nodes = _preorder(tree)
    index = {id(nd): i for i, nd in enumerate(nodes)}
    parent = [-1] * len(nodes)
    length: list[float | None] = [None] * len(nodes)
    leaf: dict[int, str | None] = {}
    inner: list[str | None] = [None] * len(nodes)
    for i, nd in enumerate(nodes):
        p = nd.parent_node
        if p is not None:
            parent[i] = index[id(p)]
            length[i] = nd.edge.length
        if nd.child_nodes():
            inner[i] = nd.label
        else:
            lab = nd.label if nd.label is not None else (nd.taxon.label if nd.taxon is not None else None)
            leaf[i] = None if lab is None else str(lab)
    return _Topo(parent, length, leaf, inner)


def check_tree(tree: Any, name: str = "tree") -> None:
    """Raise :class:`InputError` unless every tip has a unique label and every edge
    (except the root's) a finite, non-negative length. *name* is the file named in
    the problem."""
    _check(_topology(tree), name)


def _check(topo: _Topo, name: str) -> None:
    labels = list(topo.leaf.values())
    if any(lab is None or str(lab).strip() == "" for lab in labels):
        raise _tree_problem(name, "tree-tip-label", f"{sum(lab is None or not str(lab).strip() for lab in labels)} tip(s) without a label")
    seen: dict[str, int] = {}
    for lab in labels:
        seen[lab] = seen.get(lab, 0) + 1
    dups = sorted(k for k, c in seen.items() if c > 1)
    if dups:
        raise _tree_problem(
            name, "tree-duplicate-tip", f"duplicate tip label(s): {', '.join(dups[:10])}", "each tip label must occur once", value=dups[0]
        )
    missing, negative = [], []
    for i in range(1, len(topo.parent)):
        length = topo.length[i]
        where = topo.leaf.get(i) or topo.inner_label[i] or "an internal node"
        if length is None:
            missing.append(where)
        elif not math.isfinite(length) or length < 0:
            negative.append(where)
    if missing:
        raise _tree_problem(
            name,
            "tree-branch-lengths",
            f"{len(missing)} edge(s) without a branch length (e.g. above {missing[0]!r}); phylogenetic fits need branch lengths",
            "write every edge as label:length, e.g. (A:1.2,B:0.8):0.5",
        )
    if negative:
        raise _tree_problem(
            name, "tree-branch-lengths", f"{len(negative)} edge(s) with a negative or non-finite length (e.g. above {negative[0]!r})"
        )


def _as_topo(tree: Any) -> _Topo:
    """The checked topology of a tree, a Newick file name or Newick text."""
    if isinstance(tree, _Topo):
        return tree
    if isinstance(tree, str | Path):
        tree = read_tree(tree)
    topo = _topology(tree)
    _check(topo, "tree")
    return topo


# --------------------------------------------------------------------------- tip matching


@dataclass(frozen=True)
class TipMatch:
    """How table labels were matched to the tips of a tree.

    Attributes
    ----------
    pairs : tuple of (label, tip, how)
        Matched table label, tree tip label, and ``"tree_label"`` (explicit map)
        or ``"name"`` (same name after underscores/spaces and case are folded).
    taxa_without_tips : tuple of str
        Table labels with no tip (excluded from tree-based fits).
    tips_without_data : tuple of str
        Tip labels with no table row (pruned from the tree).
    """

    pairs: tuple[tuple[str, str, str], ...]
    taxa_without_tips: tuple[str, ...]
    tips_without_data: tuple[str, ...]

    @property
    def tip_of(self) -> dict[str, str]:
        """Table label -> tip label."""
        return {a: b for a, b, _ in self.pairs}

    def to_dict(self) -> dict:
        return {
            "pairs": [{"label": a, "tip": b, "how": h} for a, b, h in self.pairs],
            "taxa_without_tips": list(self.taxa_without_tips),
            "tips_without_data": list(self.tips_without_data),
        }

    def summary(self) -> str:
        lines = [f"{len(self.pairs)} taxa matched to tips"]
        if self.taxa_without_tips:
            lines.append(f"{len(self.taxa_without_tips)} taxa not in the tree: " + ", ".join(self.taxa_without_tips))
        if self.tips_without_data:
            lines.append(f"{len(self.tips_without_data)} tips without data (pruned): " + ", ".join(self.tips_without_data))
        return "\n".join(lines)


def _preorder(tree: Any) -> list:
    """Nodes of a dendropy tree in pre-order (children in their order), iteratively."""
    out = []
    stack = [tree.seed_node]
    while stack:
        nd = stack.pop()
        out.append(nd)
        ch = nd.child_nodes()
        if ch:
            stack.extend(reversed(ch))
    return out





def match_tips(tree: Any, labels: Sequence[str], tree_labels: Mapping[str, str] | None = None) -> TipMatch:
    """Match table labels to tree tips.

    Parameters
    ----------
    tree : dendropy.Tree or str
        The tree (or a Newick file/string, read with :func:`read_tree`).
    labels : list of str
        Accepted taxon names of the table, each once.
    tree_labels : dict, optional
        Explicit map taxon -> tip label (the ``tree_label`` column of taxa.csv).
        It is used first; a mapped label is looked up exactly, then by folded name.

    Returns
    -------
    TipMatch
        Matched pairs and both unmatched lists.

    Raises
    ------
    InputError
        Two tips, or two table labels, that become the same name once underscores,
        spaces and case are folded (the match would be ambiguous); repeated table labels.

    Examples
    --------
    >>> m = match_tips("((Apis_mellifera:1,Bombus:1):1,Musca:2);", ["apis mellifera", "Musca", "Homo"])
    >>> m.pairs[0], m.taxa_without_tips, m.tips_without_data
    (('apis mellifera', 'Apis_mellifera', 'name'), ('Homo',), ('Bombus',))
    """
    return _match(_as_topo(tree), labels, tree_labels)


def _match(topo: _Topo, labels: Sequence[str], tree_labels: Mapping[str, str] | None) -> TipMatch:
    tips = topo.tips
    tip_set = set(tips)
    by_key: dict[str, list[str]] = {}
    for tip in tips:
        by_key.setdefault(_norm(tip), []).append(tip)
    problems: list[Problem] = []
    for group in by_key.values():
        if len(group) > 1:
            problems.append(
                Problem("error", "tree", None, None, group[0], "tree-ambiguous-tip",
                        f"tips {group} are the same name once underscores, spaces and case are folded", "rename one of them")
            )
    labels = [str(lab) for lab in labels]
    counts: dict[str, int] = {}
    for lab in labels:
        counts[lab] = counts.get(lab, 0) + 1
    for lab, c in counts.items():
        if c > 1:
            problems.append(Problem("error", "table", None, "taxon", lab, "taxon-duplicate", f"taxon {lab!r} occurs {c} times", "give one row per taxon"))
    if problems:
        raise InputError(problems)
    explicit = {str(k): str(v) for k, v in (tree_labels or {}).items() if v is not None and str(v).strip() != "" and str(v) != "nan"}
    pairs: list[tuple[str, str, str]] = []
    used: dict[str, str] = {}
    unmatched: list[str] = []
    for lab in labels:
        tip, how = None, "name"
        if lab in explicit:
            want, how = explicit[lab], "tree_label"
            if want in tip_set:
                tip = want
            elif len(by_key.get(_norm(want), [])) == 1:
                tip = by_key[_norm(want)][0]
        else:
            cand = by_key.get(_norm(lab), [])
            if len(cand) == 1:
                tip = cand[0]
        if tip is None:
            unmatched.append(lab)
            continue
        if tip in used:
            problems.append(
                Problem("error", "table", None, "taxon", lab, "tree-tip-claimed",
                        f"taxa {used[tip]!r} and {lab!r} both match tip {tip!r}", "give one of them a distinct tree_label")
            )
            continue
        used[tip] = lab
        pairs.append((lab, tip, how))
    if problems:
        raise InputError(problems)
    without = tuple(t for t in tips if t not in used)
    return TipMatch(tuple(pairs), tuple(unmatched), without)


def dataset_tree_labels(taxa: Any, tips: Sequence[str], file: str = "taxa.csv") -> dict[str, str]:
    """Accepted taxon -> tip label from a taxa table, refusing one taxon on two tips.

    Every row of ``taxa`` (columns ``taxon``, optional ``accepted_name`` and
    ``tree_label``) names a tip for its accepted taxon: its ``tree_label`` if given,
    else a tip whose name equals the row's name once underscores, spaces and case
    are folded. When the rows of one accepted taxon (the name itself and its
    synonyms) point at two different tips, the tree holds that species twice, and
    keeping either tip silently would drop or swap data: that is an
    :class:`InputError` naming both labels and the rows.

    Returns
    -------
    dict
        Accepted name -> tip label, for the taxa that have a tip (only the explicit
        ``tree_label`` entries and synonym-matched tips; plain name matches are left
        to :func:`match_tips`).
    """
    if taxa is None or "taxon" not in taxa:
        return {}
    tip_set = set(tips)
    by_key: dict[str, list[str]] = {}
    for tip in tips:
        by_key.setdefault(_norm(tip), []).append(tip)
    acc_col = taxa["accepted_name"] if "accepted_name" in taxa else taxa["taxon"]
    lab_col = taxa["tree_label"] if "tree_label" in taxa else [None] * len(taxa)
    found: dict[str, dict[str, list[int]]] = {}  # accepted -> tip -> rows (spreadsheet numbering)
    explicit: dict[str, str] = {}
    for k, (name, acc, lab) in enumerate(zip(taxa["taxon"], acc_col, lab_col, strict=True)):
        name = str(name)
        acc = acc if isinstance(acc, str) and acc.strip() else name
        row = k + 2
        tip = None
        if isinstance(lab, str) and lab.strip():
            tip = lab if lab in tip_set else (by_key[_norm(lab)][0] if len(by_key.get(_norm(lab), [])) == 1 else None)
            if tip is not None:
                explicit[acc] = tip
        elif len(by_key.get(_norm(name), [])) == 1:
            tip = by_key[_norm(name)][0]
        if tip is not None:
            found.setdefault(acc, {}).setdefault(tip, []).append(row)
    problems = []
    for acc, tips_of in found.items():
        if len(tips_of) > 1:
            shown = "; ".join(f"{t!r} (row {', '.join(map(str, r))})" for t, r in tips_of.items())
            first = min(min(r) for r in tips_of.values())
            problems.append(Problem(
                "error", file, first, "tree_label", acc, "tree-two-tips",
                f"accepted taxon {acc!r} matches {len(tips_of)} tips of the tree: {shown}; a fit would keep one "
                "and silently prune the other",
                "remove the duplicate tip from the tree, or correct the tree_label / synonym row"))
    if problems:
        raise InputError(problems)
    return {acc: next(iter(t)) for acc, t in found.items() if acc in explicit or next(iter(t)) != acc}


def tip_labels(tree: Any) -> tuple[str, ...]:
    """The tip labels of a tree (dendropy tree, Newick file or text), in pre-order."""
    return tuple(_as_topo(tree).tips)


def nearest_tip(label: str, tips: Sequence[str]) -> str | None:
    """The tip label most like *label* (difflib ratio >= 0.6 on folded names), or None."""
    import difflib

    keys = {_norm(t): t for t in tips}
    hit = difflib.get_close_matches(_norm(label), list(keys), n=1, cutoff=0.6)
    return keys[hit[0]] if hit else None


def tree_problems(ds: Any) -> list[Problem]:
    """What a tree-based fit would reject or silently drop, for ``comparo check``.

    Errors: tip labels or branch lengths a PGLS fit refuses; one accepted taxon on two
    tips. Warnings: each taxon of the compilation without a tip (it would be left out
    of every tree-based fit), with the nearest tip label as a suggestion.
    """
    tree = getattr(ds, "tree", None)
    if tree is None:
        return []
    file = "tree.nwk"
    try:
        topo = _topology(tree)
        _check(topo, file)
    except InputError as exc:
        return problems_from_frame(exc.problems)
    try:
        labels_map = dataset_tree_labels(ds.taxa, topo.tips)
    except InputError as exc:
        return problems_from_frame(exc.problems)
    from comparo.curate import accepted_names

    names = sorted(set(accepted_names(ds).dropna().astype(str)))
    try:
        m = _match(topo, names, labels_map)
    except InputError as exc:
        return problems_from_frame(exc.problems)
    out = []
    for lab in m.taxa_without_tips:
        near = nearest_tip(lab, m.tips_without_data or topo.tips)
        hint = (f"did you mean tip {near!r}? fix the spelling or give a tree_label in taxa.csv" if near
                else "add the taxon to the tree or accept that tree-based fits leave it out")
        out.append(Problem("warning", file, None, None, lab, "taxon-without-tip",
                           f"taxon {lab!r} has no tip in the tree; PGLS and other tree-based fits leave it out", hint))
    return out


# --------------------------------------------------------------------------- flat tree


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


# --------------------------------------------------------------------------- engine


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


def gls_quantities(ft: FlatTree, Z: np.ndarray, edges: np.ndarray | None = None, *, diag_only: bool = False) -> GLSQuantities:
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
            [Problem("error", "tree", None, None, bad[0], "tree-zero-tip",
                     f"tip edge(s) of length 0 ({', '.join(bad)}): the tip variance is 0 and the covariance cannot be inverted this way",
                     "give tip edges a positive length, use lambda < 1, or add measurement error")]
        )
    w = m if diag_only else m * m
    S = np.zeros((N, 2 + m + w))  # packed per-node state: L, p, q (m), W (w)
    S[:n, 0] = np.log(tt)
    S[:n, 1] = 1.0 / tt
    S[:n, 2 : 2 + m] = Z / tt[:, None]
    S[:n, 2 + m :] = (Z * Z / tt[:, None]) if diag_only else (Z[:, :, None] * Z[:, None, :]).reshape(n, w) / tt[:, None]
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
            if diag_only:
                blk[:, 2 + m :] -= c * qa * qa
            else:
                blk[:, 2 + m :] -= c * (qa[:, :, None] * qa[:, None, :]).reshape(b - a, w)
            blk[:, 1:2 + m] /= d[:, None]
        if k < len(bounds) - 2:
            starts, parents = ft.segments[k]
            S[parents] += np.add.reduceat(blk, starts, axis=0)
    root = S[N - 1]
    Wr = root[2 + m :].copy()
    return GLSQuantities(float(root[0]), float(root[1]), root[2 : 2 + m].copy(), Wr if diag_only else Wr.reshape(m, m))


# --------------------------------------------------------------------------- GLS fits


@dataclass(frozen=True, eq=False)
class _Gls:
    beta: np.ndarray
    cov: np.ndarray  # covariance of beta
    rss: float  # generalised RSS (y-Xb)'V⁻¹(y-Xb), V as scaled (= C(λ) without ME)
    rss_null: float  # same for the intercept-only model
    sigma2: float  # BM rate (REML estimate without ME, ML/REML optimum with ME)
    loglik_ml: float
    loglik_reml: float
    logdet: float


def _solve_from(gq: GLSQuantities, p: int) -> tuple[np.ndarray, np.ndarray, float, float, float]:
    """beta, X'V⁻¹X, RSS, intercept-only RSS and ln|X'V⁻¹X| from the root quantities
    of Z = [X | y] (X with p columns)."""
    W = gq.W
    XtX, Xty, yty = W[:p, :p], W[:p, p], W[p, p]
    beta = np.linalg.solve(XtX, Xty)
    rss = float(yty - Xty @ beta)
    rss = max(rss, 0.0)
    rss_null = float(yty - gq.q[p] ** 2 / gq.p)
    logdet_x = np.linalg.slogdet(XtX)[1]
    return beta, XtX, rss, rss_null, float(logdet_x)


def _gls_fixed(ft: FlatTree, X: np.ndarray, y: np.ndarray, lam: float) -> _Gls:
    """GLS with V = sigma²·C(lambda), sigma² profiled out (no measurement error)."""
    n, p = X.shape
    gq = gls_quantities(ft, np.column_stack([X, y]), pagel_edges(ft, lam))
    beta, XtX, rss, rss_null, ldx = _solve_from(gq, p)
    s2_ml = rss / n
    s2_r = rss / (n - p) if n > p else math.nan
    tiny = 1e-300
    ll_ml = -0.5 * (n * math.log(2 * math.pi * max(s2_ml, tiny)) + gq.logdet + n)
    ll_r = -0.5 * ((n - p) * math.log(2 * math.pi * max(s2_r, tiny)) + gq.logdet + ldx + (n - p)) if n > p else math.nan
    cov = s2_r * np.linalg.inv(XtX)
    return _Gls(beta, cov, rss, rss_null, s2_r, ll_ml, ll_r, gq.logdet)


def _gls_me(ft: FlatTree, X: np.ndarray, y: np.ndarray, lam: float, s2: float, se2: np.ndarray) -> _Gls:
    """GLS with V = sigma²·C(lambda) + diag(se²) at a given sigma² (Ives et al. 2007)."""
    n, p = X.shape
    e = s2 * pagel_edges(ft, lam)
    e[:n] += se2
    gq = gls_quantities(ft, np.column_stack([X, y]), e)
    beta, XtX, rss, rss_null, ldx = _solve_from(gq, p)
    ll_ml = -0.5 * (n * math.log(2 * math.pi) + gq.logdet + rss)
    ll_r = -0.5 * ((n - p) * math.log(2 * math.pi) + gq.logdet + ldx + rss)
    return _Gls(beta, np.linalg.inv(XtX), rss, rss_null, s2, ll_ml, ll_r, gq.logdet)


def _gls(ft: FlatTree, X: np.ndarray, y: np.ndarray, lam: float, se2: np.ndarray | None, reml: bool) -> _Gls:
    """GLS at lambda; with measurement error, sigma² maximises the (RE)ML likelihood."""
    if se2 is None or not np.any(se2 > 0):
        return _gls_fixed(ft, X, y, lam)
    from scipy.optimize import minimize_scalar

    base = _gls_fixed(ft, X, y, lam)
    s0 = max(base.rss / X.shape[0], 1e-300)
    u0 = math.log(s0)

    def negll(u: float) -> float:
        g = _gls_me(ft, X, y, lam, math.exp(u), se2)
        return -(g.loglik_reml if reml else g.loglik_ml)

    res = minimize_scalar(negll, bounds=(u0 - 25.0, u0 + 5.0), method="bounded", options={"xatol": 1e-7})
    return _gls_me(ft, X, y, lam, math.exp(float(res.x)), se2)


def _ll(g: _Gls, reml: bool) -> float:
    return g.loglik_reml if reml else g.loglik_ml


@dataclass(frozen=True, eq=False)
class _LambdaFit:
    lam: float
    ci: tuple[float, float] | None
    loglik: float
    ll0: float | None
    ll1: float | None
    fit: _Gls
    top: float | None  # upper end of the search (1, or 1 - 1e-6 with zero-length tip edges)


def _fit_lambda(ft: FlatTree, X: np.ndarray, y: np.ndarray, lambda_: Any, se2: np.ndarray | None, reml: bool, ci: float) -> _LambdaFit:
    """Pagel's lambda: fixed, or maximising the (RE)ML profile likelihood on [0, 1]
    (a grid of 11 points, then a bounded Brent refinement around the best), with the profile CI
    {lambda: 2(l_max - l(lambda)) <= chi²_1(ci)}."""
    from scipy.optimize import brentq, minimize_scalar
    from scipy.stats import chi2

    if not (isinstance(lambda_, str) and lambda_.strip().lower() == "ml"):
        try:
            lam = float(lambda_)
        except (TypeError, ValueError):
            raise UsageError(f"--lambda must be 'ml' or a number in [0, 1], got {lambda_!r}") from None
        if not 0.0 <= lam <= 1.0:
            raise UsageError(f"--lambda must be in [0, 1], got {lam}")
        g = _gls(ft, X, y, lam, se2, reml)
        return _LambdaFit(lam, None, _ll(g, reml), None, None, g, None)

    # a zero-length tip edge has zero variance at lambda = 1 (no measurement error):
    # the engine needs t > 0 there, so the search stops just short of 1
    zero = ft.length[: ft.n_tips] <= 0
    if se2 is not None:
        zero &= se2 <= 0
    top = 1.0 - 1e-6 if np.any(zero) else 1.0
    cache: dict[float, float] = {}

    def ll(lam: float) -> float:
        lam = float(min(top, max(0.0, lam)))
        if lam not in cache:
            cache[lam] = _ll(_gls(ft, X, y, lam, se2, reml), reml)
        return cache[lam]

    grid = np.linspace(0.0, top, 11)
    vals = np.array([ll(v) for v in grid])
    i = int(np.nanargmax(vals))
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
    res = minimize_scalar(lambda v: -ll(v), bounds=(lo, hi), method="bounded", options={"xatol": 1e-6})
    best = max([(float(res.x), ll(float(res.x))), (float(grid[i]), float(vals[i]))], key=lambda t: t[1])
    lam_hat, ll_max = best
    crit = float(chi2.ppf(ci, 1))

    def g(v: float) -> float:
        return 2.0 * (ll_max - ll(v)) - crit

    # lower limit: last grid point below lam_hat outside the region, root between it and the next
    below = [v for v in grid if v < lam_hat]
    lower = 0.0
    for v in reversed(below):
        if g(v) > 0:
            right = min([w for w in grid if w > v] + [lam_hat])
            right = min(right, lam_hat)
            lower = brentq(g, v, right, xtol=1e-6) if g(right) < 0 else right
            break
    above = [v for v in grid if v > lam_hat]
    upper = top
    for v in above:
        if g(v) > 0:
            left = max([w for w in grid if w < v] + [lam_hat])
            left = max(left, lam_hat)
            upper = brentq(g, left, v, xtol=1e-6) if g(left) < 0 else left
            break
    fit = _gls(ft, X, y, lam_hat, se2, reml)
    return _LambdaFit(lam_hat, (float(lower), float(upper)), ll_max, ll(0.0), ll(top), fit, top)


def _lr(ll_max: float, ll_h: float | None) -> dict | None:
    """Likelihood-ratio test of a fixed lambda; p from chi²_1. On the boundary of
    [0, 1] the null distribution is the 50:50 mixture of chi²_0 and chi²_1 (Self &
    Liang 1987, JASA 82:605-610), so this p is conservative (twice the mixture's)."""
    from scipy.stats import chi2

    if ll_h is None:
        return None
    stat = max(0.0, 2.0 * (ll_max - ll_h))
    return {"loglik": _f(ll_h), "statistic": _f(stat), "p": _f(chi2.sf(stat, 1))}


# --------------------------------------------------------------------------- pgls_fit

_LOGS = {"10": np.log10, "e": np.log, "none": None}


def _transform(v: np.ndarray, log: str) -> np.ndarray:
    f = _LOGS[log]
    return v if f is None else f(v)


def _se_on_scale(u: np.ndarray, v: np.ndarray, log: str) -> np.ndarray:
    """Standard uncertainty of a value moved to the fitted scale (first order)."""
    if log == "10":
        return u / (v * math.log(10.0))
    if log == "e":
        return u / v
    return u


def pgls_fit(
    table: pd.DataFrame,
    x: str,
    y: str,
    *,
    tree: Any,
    log: str = "10",
    ci: float = 0.95,
    test_slope: float | None = None,
    taxon_col: str = "taxon",
    lambda_: str | float = "ml",
    reml: bool = False,
    tree_labels: Mapping[str, str] | None = None,
    tip_se: str | bool | Mapping[str, float] | None = None,
    by: str | None = None,
) -> dict:
    """Phylogenetic generalised least squares of y on x with Pagel's lambda.

    Model: Y = alpha + beta·X + e, e ~ N(0, V), V = sigma²·C(lambda) [+ diag(se²)],
    with X, Y the (log) values, C the BM covariance of the tree pruned to the
    matched taxa, and C(lambda) Pagel's transform (:func:`pagel_edges`).

    Parameters
    ----------
    table : DataFrame
        One row per taxon; columns *x*, *y*, *taxon_col* (and *by*, *tip_se*).
    x, y : str
        Column names (values in the table's canonical units).
    tree : dendropy.Tree or str
        The tree, or a Newick file/string (:func:`read_tree`).
    log : {"10", "e", "none"}
        Transform of both axes; the intercept is on that scale (lg a for "10").
    ci : float
        Confidence level of every interval.
    test_slope : float, optional
        H0 slope value: t = (b - b0)/se(b), two-sided p from t(n - p).
    taxon_col : str
        Label column matched to tips (:func:`match_tips`).
    lambda_ : "ml" or float
        "ml": maximise the likelihood over [0, 1] and give the profile-likelihood CI
        and LR tests of lambda = 0 and lambda = 1; a number fixes lambda.
    reml : bool
        REML for the lambda search and the reported log-likelihood.
    tree_labels : dict, optional
        taxon -> tip label, used before name matching.
    tip_se : str, True, or dict, optional
        Standard uncertainty of y per taxon, in y's units on the data scale: a column
        name, True for the column ``f"{y}_u"``, or a dict label -> value. Moved to the
        fitted scale to first order (u/(y·ln 10) for log 10) and added as variance to
        the tip edges (Ives et al. 2007). Missing values count as 0 and are listed.
    by : str, optional
        Grouping column: separate intercepts and slopes per group (interaction
        model, lambda estimated in it), an F test of equal slopes and, given a
        common slope, of equal elevations.

    Returns
    -------
    dict
        The ``fit --format json`` keys (see DESIGN.md), plus: ``slope_se``,
        ``intercept_se``, ``sigma2`` (BM rate, fitted-scale units² per branch-length
        unit), ``df``, ``likelihood`` ("ML" or "REML"), ``loglik_convention``,
        ``r2_kind``, ``lambda_tests`` (``lambda_0``, ``lambda_1``: loglik, statistic,
        p; None for a fixed lambda), ``group_tests`` (with *by*: ``common_slope``
        with the equal-slopes F test, ``elevation`` F test given the common slope,
        and the lambda of the interaction model), ``measurement_error``,
        ``tips_pruned`` (tips without usable data) and ``taxa_without_tips``.

    Notes
    -----
    beta = (X'V⁻¹X)⁻¹X'V⁻¹y (Grafen 1989). Without measurement error sigma² is
    profiled out: ML l = -½[n ln(2π RSS/n) + ln|C| + n], REML
    l_R = -½[(n-p) ln(2π RSS/(n-p)) + ln|C| + ln|X'C⁻¹X| + (n-p)] (no ½ln|X'X| term),
    and cov(beta) = RSS/(n-p)·(X'C⁻¹X)⁻¹, CIs with t(n-p). With measurement error
    sigma² is found numerically and cov(beta) = (X'V⁻¹X)⁻¹ at its estimate (t(n-p)
    quantiles kept). ``r2`` = 1 - RSS/RSS_0, both generalised residual sums of
    squares under the fitted V, RSS_0 of the intercept-only model: the share of
    phylogenetically weighted variance the line explains (not the OLS R²).
    All quantities come from :func:`gls_quantities` in O(n) per likelihood.

    References
    ----------
    Grafen A (1989) Phil Trans R Soc B 326:119-157. Pagel M (1999) Nature
    401:877-884. Freckleton RP, Harvey PH, Pagel M (2002) Am Nat 160:712-726.
    Ives AR, Midford PE, Garland T (2007) Syst Biol 56:252-270. Ho LST, Ané C
    (2014) Syst Biol 63:397-408.
    """
    from scipy.stats import t as tdist

    log = "none" if log is None else str(log)
    if log not in _LOGS:
        raise UsageError(f"log must be one of 10, e, none; got {log!r}")
    if not 0.0 < ci < 1.0:
        raise UsageError(f"ci must be in (0, 1), got {ci}")
    for col in [taxon_col, x, y] + ([by] if by else []):
        if col not in table.columns:
            raise UsageError(f"column {col!r} not in the table (columns: {', '.join(map(str, table.columns))})")
    se_col = None
    se_map: Mapping[str, float] | None = None
    if tip_se is True:
        se_col = f"{y}_u"
    elif isinstance(tip_se, str):
        se_col = tip_se
    elif isinstance(tip_se, Mapping):
        se_map = {str(k): v for k, v in tip_se.items()}
    if se_col is not None and se_col not in table.columns:
        raise UsageError(f"measurement-error column {se_col!r} not in the table")

    topo = _as_topo(tree)
    labels = [str(v) for v in table[taxon_col].tolist()]
    match = _match(topo, labels, tree_labels)
    tip_of = match.tip_of
    xv = np.asarray(table[x], dtype=float)
    yv = np.asarray(table[y], dtype=float)
    excluded: list[dict] = []
    keep: list[int] = []
    for i, lab in enumerate(labels):
        reasons = []
        for name, v in ((x, xv[i]), (y, yv[i])):
            if not math.isfinite(v):
                reasons.append(f"missing value of {name}")
            elif log != "none" and v <= 0:
                reasons.append(f"non-positive {name} under log {log}")
        if by is not None:
            gval = table[by].iloc[i]
            if gval is None or (isinstance(gval, float) and math.isnan(gval)):
                reasons.append(f"missing group in {by}")
        if lab not in tip_of:
            reasons.append("taxon not in the tree")
        if reasons:
            excluded.append({"label": lab, "reason": "; ".join(reasons)})
        else:
            keep.append(i)
    groups_of = None
    if by is not None:
        gcol = table[by].astype(str).to_numpy()
        counts: dict[str, int] = {}
        for i in keep:
            counts[gcol[i]] = counts.get(gcol[i], 0) + 1
        small = {g for g, c in counts.items() if c < 2}
        if small:
            for i in [i for i in keep if gcol[i] in small]:
                excluded.append({"label": labels[i], "reason": f"only taxon of group {gcol[i]!r} in {by}"})
            keep = [i for i in keep if gcol[i] not in small]
        groups_of = gcol
    n = len(keep)
    need = 3 if by is None else 2 * len({groups_of[i] for i in keep}) + 1
    if n < need:
        raise UsageError(f"PGLS needs at least {need} taxa with x, y and a tip in the tree; {n} remain "
                         f"({len(match.taxa_without_tips)} taxa not in the tree, {len(excluded)} excluded in all)")
    keep_labels = [labels[i] for i in keep]
    tips = [tip_of[lab] for lab in keep_labels]
    ft = _flat(topo, tips)
    row_of = {t: i for i, t in zip(keep, tips, strict=True)}
    keep = [row_of[t] for t in ft.tips]  # table rows in the tree's tip order
    keep_labels = [labels[i] for i in keep]
    used_tips = set(tips)
    pruned = [t for t in topo.tips if t not in used_tips]
    X1 = _transform(xv[keep], log)
    Y = _transform(yv[keep], log)

    se2 = None
    me_info = None
    if se_col is not None or se_map is not None:
        if se_col is not None:
            u = np.asarray(table[se_col], dtype=float)[keep]
        else:
            u = np.array([float(se_map.get(lab, math.nan)) for lab in keep_labels])
        if np.any(u < 0):
            bad = [keep_labels[i] for i in np.flatnonzero(u < 0)]
            raise InputError([Problem("error", "table", None, se_col, bad[0], "se-negative", f"negative standard uncertainty for {', '.join(bad[:5])}")])
        missing_se = [keep_labels[i] for i in np.flatnonzero(~np.isfinite(u))]
        u = np.where(np.isfinite(u), u, 0.0)
        se2 = _se_on_scale(u, yv[keep], log) ** 2
        me_info = {"source": se_col if se_col else "mapping", "tips_with_error": int(np.sum(se2 > 0)), "missing_set_to_zero": missing_se}

    Xpool = np.column_stack([np.ones(n), X1])
    lf = _fit_lambda(ft, Xpool, Y, lambda_, se2, reml, ci)
    g = lf.fit
    p = 2
    df = n - p
    tq = float(tdist.ppf(0.5 + ci / 2.0, df))
    se_b = np.sqrt(np.diag(g.cov))
    b0, b1 = float(g.beta[0]), float(g.beta[1])
    ts = None
    if test_slope is not None:
        stat = (b1 - float(test_slope)) / se_b[1]
        ts = {"value": float(test_slope), "statistic": _f(stat), "p": _f(2.0 * tdist.sf(abs(stat), df))}
    r2 = 1.0 - g.rss / g.rss_null if g.rss_null > 0 else math.nan

    groups = None
    group_tests = None
    if by is not None:
        groups, group_tests = _group_fit(ft, X1, Y, [groups_of[i] for i in keep], lambda_, se2, reml, ci)

    lam_tests = None
    if lf.ll0 is not None:
        lam_tests = {"lambda_0": _lr(lf.loglik, lf.ll0), "lambda_1": _lr(lf.loglik, lf.ll1),
                     "null_distribution": "chi2(1); conservative on the boundary of [0, 1]",
                     "search_interval": [0.0, lf.top],
                     "note": None if lf.top == 1.0 else
                     "tips with zero-length edges: lambda searched on [0, 1 - 1e-6]; 'lambda_1' is evaluated there"}
    return {
        "method": "pgls",
        "x": x,
        "y": y,
        "log": log,
        "n": n,
        "slope": _f(b1),
        "slope_ci": [_f(b1 - tq * se_b[1]), _f(b1 + tq * se_b[1])],
        "intercept": _f(b0),
        "intercept_ci": [_f(b0 - tq * se_b[0]), _f(b0 + tq * se_b[0])],
        "r2": _f(r2),
        "ci_level": float(ci),
        "test_slope": ts,
        "lambda": _f(lf.lam),
        "lambda_ci": None if lf.ci is None else [_f(lf.ci[0]), _f(lf.ci[1])],
        "loglik": _f(lf.loglik),
        "groups": groups,
        "outliers": [],
        "excluded": excluded,
        "breakpoint": None,
        "sensitivity": None,
        # extras
        "slope_se": _f(se_b[1]),
        "intercept_se": _f(se_b[0]),
        "sigma2": _f(g.sigma2),
        "df": df,
        "likelihood": "REML" if reml else "ML",
        "loglik_convention": (
            "REML: -1/2[(n-p)ln(2*pi*s2) + ln|V| + ln|X'V^-1X| + (n-p)], no +1/2 ln|X'X| term"
            if reml else "ML: -1/2[n ln(2*pi*RSS/n) + ln|V| + n]"
        ),
        "r2_kind": "generalised: 1 - RSS/RSS_null under the fitted phylogenetic covariance",
        "lambda_tests": lam_tests,
        "group_tests": group_tests,
        "measurement_error": me_info,
        "tips_pruned": pruned,
        "taxa_without_tips": list(match.taxa_without_tips),
    }


def _group_fit(ft: FlatTree, X1: np.ndarray, Y: np.ndarray, grp: list[str], lambda_: Any, se2: np.ndarray | None, reml: bool, ci: float) -> tuple[list, dict]:
    """Interaction model Y ~ group + group:X (lambda estimated in it); F tests of
    equal slopes (interaction) and, in the common-slope model, of equal elevations.
    With V fixed at the fitted lambda each F is the extra-sum-of-squares (Wald) F."""
    from scipy.stats import f as fdist
    from scipy.stats import t as tdist

    levels = sorted(set(grp))
    G = len(levels)
    n = len(Y)
    D = np.column_stack([np.asarray([g == lv for g in grp], dtype=float) for lv in levels])
    Xint = np.column_stack([D, D * X1[:, None]])  # per-group intercepts and slopes
    lf = _fit_lambda(ft, Xint, Y, lambda_, se2, reml, ci)
    lam = lf.lam
    full = lf.fit
    Xadd = np.column_stack([D, X1])
    add = _gls(ft, Xadd, Y, lam, se2, reml)
    ones = np.column_stack([np.ones(n), X1])
    pooled = _gls(ft, ones, Y, lam, se2, reml)
    df_full = n - 2 * G
    me = se2 is not None and np.any(se2 > 0)

    def ftest(small: _Gls, big: _Gls, q: int, df2: int, beta_idx: list[int] | None = None) -> dict:
        if me:  # Wald test on the contrasts of the big model (covariance not rescaled)
            Cm = np.zeros((q, big.beta.size))
            for j, (a, b) in enumerate(beta_idx or []):
                Cm[j, a], Cm[j, b] = 1.0, -1.0
            d = Cm @ big.beta
            stat = float(d @ np.linalg.solve(Cm @ big.cov @ Cm.T, d)) / q
        else:
            stat = ((small.rss - big.rss) / q) / (big.rss / df2)
        return {"statistic": _f(stat), "df1": q, "df2": df2, "p": _f(fdist.sf(stat, q, df2))}

    tq = float(tdist.ppf(0.5 + ci / 2.0, df_full))
    rows = []
    for j, lv in enumerate(levels):
        bi, bs = full.beta[j], full.beta[G + j]
        si, ss = math.sqrt(full.cov[j, j]), math.sqrt(full.cov[G + j, G + j])
        rows.append({
            "group": lv, "n": int(D[:, j].sum()),
            "slope": _f(bs), "slope_ci": [_f(bs - tq * ss), _f(bs + tq * ss)],
            "intercept": _f(bi), "intercept_ci": [_f(bi - tq * si), _f(bi + tq * si)],
        })
    slope_pairs = [(G + j, G + j + 1) for j in range(G - 1)]
    elev_pairs = [(j, j + 1) for j in range(G - 1)]
    tq_add = float(tdist.ppf(0.5 + ci / 2.0, n - G - 1))
    sc = float(add.beta[G])
    sc_se = math.sqrt(add.cov[G, G])
    slopes = ftest(add, full, G - 1, df_full, slope_pairs)
    elev = ftest(pooled, add, G - 1, n - G - 1, elev_pairs)
    tests = {
        "common_slope": {
            "slope": _f(sc), "slope_ci": [_f(sc - tq_add * sc_se), _f(sc + tq_add * sc_se)],
            "test": "F (interaction)", "statistic": slopes["statistic"], "df": [slopes["df1"], slopes["df2"]], "p": slopes["p"],
        },
        "elevation": {
            "test": "F", "statistic": elev["statistic"], "df": [elev["df1"], elev["df2"]], "p": elev["p"],
            "means": [_f(v) for v in add.beta[:G]],
        },
        "shift": None,
        "lambda": _f(lam),
        "lambda_ci": None if lf.ci is None else [_f(lf.ci[0]), _f(lf.ci[1])],
        "loglik": _f(lf.loglik),
        "note": "F tests at the lambda of the interaction model (separate slopes and intercepts per group)",
    }
    return rows, tests


# --------------------------------------------------------------------------- contrasts


def _values_on_tree(tree: Any, values: Mapping[str, float]) -> tuple[FlatTree, np.ndarray, TipMatch, list[str], list[str]]:
    """Flat tree pruned to the tips with finite values; the values in tip order; the
    match; labels with non-finite values; pruned tips."""
    topo = _as_topo(tree)
    labels = [str(k) for k in values]
    vals = {str(k): float(v) for k, v in values.items()}
    match = _match(topo, labels, None)
    pairs = [(a, b) for a, b, _ in match.pairs if math.isfinite(vals[a])]
    missing = [a for a, _, _ in match.pairs if not math.isfinite(vals[a])]
    if len(pairs) < 3:
        raise UsageError(f"{len(pairs)} values match tips of the tree; at least 3 are needed")
    ft = _flat(topo, [b for _, b in pairs])
    used = set(ft.tips)
    pruned = [t for t in topo.tips if t not in used]
    label_of = {b: a for a, b in pairs}
    return ft, np.array([vals[label_of[t]] for t in ft.tips]), match, missing, pruned


@dataclass(frozen=True, eq=False)
class Contrasts:
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
        import pandas as pd

        return pd.DataFrame({"contrast": self.contrasts, "sd": self.sd, "node_height": self.node_height})

    def to_dict(self) -> dict:
        return {
            "contrasts": _fl(self.contrasts), "sd": _fl(self.sd), "node_height": _fl(self.node_height),
            "root_value": _f(self.root_value), "root_variance": _f(self.root_variance),
            "r_abs_sd": _f(self.r_abs_sd), "p_abs_sd": _f(self.p_abs_sd),
            "r_abs_height": _f(self.r_abs_height), "p_abs_height": _f(self.p_abs_height),
            "tips_used": list(self.tips_used), "taxa_without_tips": list(self.taxa_without_tips),
            "tips_pruned": list(self.tips_pruned),
        }

    def summary(self) -> str:
        lines = [
            f"{self.contrasts.size} standardised contrasts; root value {self.root_value:.6g}",
            f"|contrast| vs sd: r = {self.r_abs_sd:.3f} (p = {self.p_abs_sd:.3g})"
            + ("  <- contrasts not well standardised; consider transforming branch lengths" if self.p_abs_sd < 0.05 else ""),
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


def pic(tree: Any, values: Mapping[str, float]) -> Contrasts:
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
    ft, yv, match, missing, pruned = _values_on_tree(tree, values)
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
                raise InputError([Problem("error", "tree", None, None, None, "tree-zero-contrast",
                                          "two sister lineages with total length 0: a contrast is undefined")])
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
        u, sd, h, float(val[N - 1]), float(ext[N - 1]), r1, p1, r2, p2,
        tuple(ft.tips), tuple(match.taxa_without_tips) + tuple(missing), tuple(pruned),
    )


# --------------------------------------------------------------------------- signal


@dataclass(frozen=True)
class SignalResult:
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
            "n": self.n, "K": _f(self.K), "K_p": _f(self.K_p), "permutations": self.permutations, "seed": self.seed,
            "lambda": _f(self.lambda_), "lambda_ci": _fl(self.lambda_ci), "loglik": _f(self.loglik),
            "lr_lambda0": _f(self.lr_lambda0), "p_lambda0": _f(self.p_lambda0),
            "lr_lambda1": _f(self.lr_lambda1), "p_lambda1": _f(self.p_lambda1),
            "taxa_without_tips": list(self.taxa_without_tips), "tips_pruned": list(self.tips_pruned),
        }

    def summary(self) -> str:
        return "\n".join([
            f"phylogenetic signal, n = {self.n}",
            f"Blomberg's K = {self.K:.4g} (permutation p = {self.K_p:.3g}, {self.permutations} permutations, seed {self.seed})",
            f"Pagel's lambda = {self.lambda_:.4g} [{self.lambda_ci[0]:.3g}, {self.lambda_ci[1]:.3g}];"
            f" LR vs 0: {self.lr_lambda0:.3g} (p = {self.p_lambda0:.3g}); vs 1: {self.lr_lambda1:.3g} (p = {self.p_lambda1:.3g})",
        ])


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


def tree_signal(tree: Any, values: Mapping[str, float], permutations: int = 999, seed: int | None = 20240601, ci: float = 0.95) -> SignalResult:
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
    ft, yv, match, missing, pruned = _values_on_tree(tree, values)
    n = ft.n_tips
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
    lf = _fit_lambda(ft, np.ones((n, 1)), yv, "ml", None, False, ci)
    t0, t1 = _lr(lf.loglik, lf.ll0), _lr(lf.loglik, lf.ll1)
    return SignalResult(
        n, K, pval, int(permutations), seed, lf.lam, lf.ci, lf.loglik,
        t0["statistic"], t0["p"], t1["statistic"], t1["p"],
        tuple(match.taxa_without_tips) + tuple(missing), tuple(pruned),
    )


# --------------------------------------------------------------------------- simulation


def random_newick(n_tips: int, seed: int | None = None, *, ultrametric: bool = False, polytomy: float = 0.0) -> str:
    """A random rooted tree with branch lengths, as Newick text (for simulation
    checks and benchmarks).

    Lineages are joined at random, two at a time, until one remains. With
    ``ultrametric`` each join happens after an exponential waiting time of mean
    2/(m - 1) for m lineages (pure-birth-like spacing) and all tips end at height 0;
    otherwise every edge length is 0.001 plus an exponential of mean 1, so tips sit at
    different depths. With probability ``polytomy`` a join takes three lineages
    instead of two (a multifurcation). Tips are ``t1 .. tn``. Seeded with
    ``numpy.random.default_rng(seed)``.
    """
    rng = np.random.default_rng(seed)
    if n_tips < 2:
        raise UsageError("a tree needs at least 2 tips")
    clusters: list[str] = [f"t{i + 1}" for i in range(n_tips)]
    heights = [0.0] * n_tips
    now = 0.0
    while len(clusters) > 1:
        k = 3 if (len(clusters) >= 3 and rng.random() < polytomy) else 2
        m = len(clusters)
        pick = rng.choice(m, size=k, replace=False)
        now += float(rng.exponential(2.0 / (m - 1))) if ultrametric else 0.0
        parts = []
        new_height = now if ultrametric else max(heights[i] for i in pick) + 1.0
        for i in pick:
            length = (new_height - heights[i]) if ultrametric else float(rng.exponential(1.0)) + 1e-3
            parts.append(f"{clusters[i]}:{length:.10g}")
        new = "(" + ",".join(parts) + ")"
        for i in sorted(pick.tolist(), reverse=True):
            clusters[i] = clusters[-1]
            heights[i] = heights[-1]
            clusters.pop()
            heights.pop()
        clusters.append(new)
        heights.append(new_height)
    return clusters[0] + ";"
