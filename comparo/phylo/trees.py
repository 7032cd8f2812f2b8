"""Reading a Newick tree (branch lengths required, deep trees supported) and checking it."""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from comparo.base.errors import InputError, Problem, UsageError
from comparo.reading.newick import DeferredTree, Topology

if TYPE_CHECKING:  # pragma: no cover
    import dendropy


_NEWICK_SOURCE = "<newick text>"


def _tree_problem(
    file: str, rule: str, message: str, hint: str = "", value: str | None = None
) -> InputError:
    return InputError([Problem("error", file, None, None, value, rule, message, hint)])


def norm(label: str) -> str:
    """Matching key: read as it looks (:func:`comparo.reading.text.visible`: a zero-width space or a
    direction mark removed), underscores as spaces, runs of white space collapsed, case folded."""
    from comparo.reading.text import visible

    return " ".join(visible(str(label)).replace("_", " ").split()).casefold()


_WHITE = re.compile(r"\s+")  # the same characters as str.split() splits on
_EDGE_WHITE = re.compile(r" ?\x00 ?")


def norm_all(labels: Sequence[str]) -> list[str]:
    """:func:`norm` of every label, in a few passes over one joined string (case folding
    and white space are per character, so the joined text folds as its parts do)."""
    labels = [str(v) for v in labels]
    text = "\x00".join(labels)
    if not labels or text.count("\x00") != len(labels) - 1:  # a label holding the separator
        return [norm(v) for v in labels]
    if not text.isascii():
        from comparo.reading.text import visible

        text = visible(text)
    text = text.replace("_", " ")
    if _WHITE.search(text):
        text = _EDGE_WHITE.sub("\x00", _WHITE.sub(" ", text)).strip(" ")
    return text.casefold().split("\x00")


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
    from comparo.base.arguments import check_kind

    check_kind(path_or_newick, (str, Path), "path_or_newick", "a Newick file name or Newick text")
    tree = _checked(path_or_newick)
    return tree.tree if isinstance(tree, DeferredTree) else tree


def tree_name(path_or_newick: str | Path) -> str:
    """How messages name a tree given as a file name or as Newick text."""
    src = str(path_or_newick)
    return _NEWICK_SOURCE if src.lstrip().startswith(("(", "[")) else src


def _read(path_or_newick: str | Path) -> Any:
    """The tree of a Newick file or text by the one Newick reader
    (:func:`comparo.reading.newick.read_newick_text`): a :class:`DeferredTree` for plain
    Newick, else a dendropy tree. Raises InputError with the reader's problems."""
    from comparo.reading.folder import not_a_file
    from comparo.reading.newick import read_newick, read_newick_text

    name = tree_name(path_or_newick)
    if name == _NEWICK_SOURCE:
        tree, probs = read_newick_text(str(path_or_newick).strip(), name)
    else:
        what = not_a_file(name)
        if what is not None:
            raise _tree_problem(
                name,
                "not-a-file",
                f"the tree path is {what}, not a file",
                "give a Newick file (comparo does not read pipes or devices)",
            )
        if not Path(name).exists():
            raise _tree_problem(
                name, "missing-file", "tree file not found", "check the path given with --tree"
            )
        tree, _text, probs = read_newick(Path(name), name)
    errors = [p for p in probs if p.severity == "error"]
    if errors or tree is None:
        raise InputError(errors or probs)
    return tree


def checked_topology(path: str | Path) -> Topology | Any:
    """The tree file as the checked topology :mod:`comparo.phylo` fits on when it is plain
    Newick (a 100,000-tip tree in well under a second, where building dendropy's tree
    objects takes seconds), else the dendropy tree; read and checked as :func:`read_tree`
    (labels, duplicates, branch lengths)."""
    tree = _checked(path)
    return tree.topology if isinstance(tree, DeferredTree) else tree


def _checked(path_or_newick: str | Path) -> Any:
    """:func:`_read`, then the checks of :func:`check_tree` (InputError on a fault)."""
    tree = _read(path_or_newick)
    deferred = isinstance(tree, DeferredTree)
    check_topology(tree.topology if deferred else topology_of(tree), tree_name(path_or_newick))
    return tree


#: One pre-order pass over a tree: parent index, edge length (None if absent), leaf labels
#: and inner-node labels; the same record the plain-Newick reader builds.
Topo = Topology


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


def topology_of(tree: Any) -> Topo:
    """The pre-order record of a tree: a :class:`Topology` as it is, the one a
    :class:`comparo.reading.newick.DeferredTree` already holds (read by
    :mod:`comparo.reading.newick`, so
    dendropy is neither imported nor walked), else one pass over the dendropy tree."""
    if isinstance(tree, Topo):
        return tree
    held = tree.__dict__.get("topology") if hasattr(tree, "__dict__") else None
    if isinstance(held, Topo):
        return held
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
            lab = (
                nd.label
                if nd.label is not None
                else (nd.taxon.label if nd.taxon is not None else None)
            )
            leaf[i] = None if lab is None else str(lab)
    return Topo(parent, length, leaf, inner)


def check_tree(tree: Any, name: str = "tree") -> None:
    """Raise :class:`InputError` unless every tip has a unique label and every edge
    (except the root's) a finite, non-negative length. *name* is the file named in
    the problem."""
    check_topology(topology_of(tree), name)


def check_topology(topo: Topo, name: str) -> None:
    """Raise the tree problem of *topo* (file *name*): tips without labels, duplicate labels,
    missing or negative branch lengths."""
    labels = list(topo.leaf.values())
    if any(lab is None or str(lab).strip() == "" for lab in labels):
        raise _tree_problem(
            name,
            "tree-tip-label",
            f"{sum(lab is None or not str(lab).strip() for lab in labels)} tip(s) without a label",
        )
    dups: list[str] = []
    if len(set(labels)) < len(labels):
        seen: dict[str, int] = {}
        for lab in labels:
            seen[lab] = seen.get(lab, 0) + 1
        dups = sorted(k for k, c in seen.items() if c > 1)
    if dups:
        raise _tree_problem(
            name,
            "tree-duplicate-tip",
            f"duplicate tip label(s): {', '.join(dups[:10])}",
            "each tip label must occur once",
            value=dups[0],
        )
    lengths = topo.length
    inf = math.inf
    missing = [i for i, v in enumerate(lengths) if v is None and i > 0]
    negative = [
        i for i, v in enumerate(lengths) if v is not None and not 0 <= v < inf and i > 0
    ]  # also NaN, inf

    def where(i: int) -> str:
        return topo.leaf.get(i) or topo.inner_label[i] or "an internal node"

    if missing:
        raise _tree_problem(
            name,
            "tree-branch-lengths",
            f"{len(missing)} edge(s) without a branch length (e.g. above {where(missing[0])!r}); "
            "phylogenetic fits need branch lengths",
            "write every edge as label:length, e.g. (A:1.2,B:0.8):0.5",
        )
    if negative:
        raise _tree_problem(
            name,
            "tree-branch-lengths",
            f"{len(negative)} edge(s) with a negative or non-finite length (e.g. above "
            f"{where(negative[0])!r})",
        )


def as_topo(tree: Any) -> Topo:
    """The checked topology of a tree, a Newick file name or Newick text."""
    if isinstance(tree, Topo):
        return tree
    if isinstance(tree, str | Path):
        tree = read_tree(tree)
    elif not (isinstance(getattr(tree, "topology", None), Topo) or hasattr(tree, "seed_node")):
        raise UsageError(
            f"tree must be a Newick file name, Newick text or a tree from comparo.read_tree "
            f"(got {type(tree).__name__} {repr(tree)[:40]})"
        )
    topo = topology_of(tree)
    check_topology(topo, "tree")
    return topo
