"""Matching table labels to tree tips, dataset tree labels, and the tree checks of the gate."""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from comparo.base.errors import InputError, Problem, problems_from_frame
from comparo.phylo.trees import Topo, as_topo, check_topology, norm, norm_all, topology_of


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
            lines.append(
                f"{len(self.taxa_without_tips)} taxa not in the tree: "
                + ", ".join(self.taxa_without_tips)
            )
        if self.tips_without_data:
            lines.append(
                f"{len(self.tips_without_data)} tips without data (pruned): "
                + ", ".join(self.tips_without_data)
            )
        return "\n".join(lines)


def match_tips(
    tree: Any, labels: Sequence[str], tree_labels: Mapping[str, str] | None = None
) -> TipMatch:
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
    >>> tree = "((Apis_mellifera:1,Bombus:1):1,Musca:2);"
    >>> m = match_tips(tree, ["apis mellifera", "Musca", "Homo"])
    >>> m.pairs[0], m.taxa_without_tips, m.tips_without_data
    (('apis mellifera', 'Apis_mellifera', 'name'), ('Homo',), ('Bombus',))
    """
    return match_labels(as_topo(tree), labels, tree_labels)


def match_labels(
    topo: Topo, labels: Sequence[str], tree_labels: Mapping[str, str] | None
) -> TipMatch:
    """Tips of *topo* matched to table *labels* (through *tree_labels* when given): a TipMatch."""
    tips = topo.tips
    tip_set = topo.node_of
    tip_keys = norm_all(tips)
    by_key = dict(
        zip(tip_keys, tips, strict=True)
    )  # folded name -> tip, when no two tips share one
    problems: list[Problem] = []
    if len(by_key) < len(tips):
        groups: dict[str, list[str]] = {}
        for key, tip in zip(tip_keys, tips, strict=True):
            groups.setdefault(key, []).append(tip)
        for group in groups.values():
            if len(group) > 1:
                problems.append(
                    Problem(
                        "error",
                        "tree",
                        None,
                        None,
                        group[0],
                        "tree-ambiguous-tip",
                        f"tips {group} are the same name once underscores, spaces and case are "
                        "folded",
                        "rename one of them",
                    )
                )
    labels = [str(lab) for lab in labels]
    if len(set(labels)) < len(labels):
        counts: dict[str, int] = {}
        for lab in labels:
            counts[lab] = counts.get(lab, 0) + 1
        for lab, c in counts.items():
            if c > 1:
                problems.append(
                    Problem(
                        "error",
                        "table",
                        None,
                        "taxon",
                        lab,
                        "taxon-duplicate",
                        f"taxon {lab!r} occurs {c} times",
                        "give one row per taxon",
                    )
                )
    if problems:
        raise InputError(problems)
    explicit = {
        str(k): str(v)
        for k, v in (tree_labels or {}).items()
        if v is not None and str(v).strip() != "" and str(v) != "nan"
    }
    pairs: list[tuple[str, str, str]] = []
    used: dict[str, str] = {}
    unmatched: list[str] = []
    for lab, key in zip(labels, norm_all(labels), strict=True):
        how = "name"
        if lab in explicit:
            want, how = explicit[lab], "tree_label"
            tip = want if want in tip_set else by_key.get(norm(want))
        else:
            tip = by_key.get(key)
        if tip is None:
            unmatched.append(lab)
            continue
        if tip in used:
            problems.append(
                Problem(
                    "error",
                    "table",
                    None,
                    "taxon",
                    lab,
                    "tree-tip-claimed",
                    f"taxa {used[tip]!r} and {lab!r} both match tip {tip!r}",
                    "give one of them a distinct tree_label",
                )
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
        by_key.setdefault(norm(tip), []).append(tip)
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
            tip = (
                lab
                if lab in tip_set
                else (by_key[norm(lab)][0] if len(by_key.get(norm(lab), [])) == 1 else None)
            )
            if tip is not None:
                explicit[acc] = tip
        elif len(by_key.get(norm(name), [])) == 1:
            tip = by_key[norm(name)][0]
        if tip is not None:
            found.setdefault(acc, {}).setdefault(tip, []).append(row)
    problems = []
    for acc, tips_of in found.items():
        if len(tips_of) > 1:
            shown = "; ".join(f"{t!r} (row {', '.join(map(str, r))})" for t, r in tips_of.items())
            first = min(min(r) for r in tips_of.values())
            problems.append(
                Problem(
                    "error",
                    file,
                    first,
                    "tree_label",
                    acc,
                    "tree-two-tips",
                    f"accepted taxon {acc!r} matches {len(tips_of)} tips of the tree: {shown}; a "
                    "fit would keep one "
                    "and silently prune the other",
                    "remove the duplicate tip from the tree, or correct the tree_label / synonym "
                    "row",
                )
            )
    if problems:
        raise InputError(problems)
    return {
        acc: next(iter(t)) for acc, t in found.items() if acc in explicit or next(iter(t)) != acc
    }


def tip_labels(tree: Any) -> tuple[str, ...]:
    """The tip labels of a tree (dendropy tree, Newick file or text), in pre-order."""
    return tuple(as_topo(tree).tips)


def nearest_tip(label: str, tips: Sequence[str]) -> str | None:
    """The tip label most like *label* (difflib ratio >= 0.6 on folded names), or None."""
    import difflib

    keys = {norm(t): t for t in tips}
    hit = difflib.get_close_matches(norm(label), list(keys), n=1, cutoff=0.6)
    return keys[hit[0]] if hit else None


def tree_problems(ds: Any, accepted: Iterable[str] | None = None) -> list[Problem]:
    """What a tree-based fit would reject or silently drop, for ``comparo check``.

    *accepted* are the accepted names of the compilation's taxa (the pipeline passes
    :func:`comparo.curation.harmonise.accepted_names`); without them, the names of
    ``ds.observations`` as reported.

    Errors: tip labels or branch lengths a PGLS fit refuses; one accepted taxon on two
    tips. Warnings: each taxon of the compilation without a tip (it would be left out
    of every tree-based fit), with the nearest tip label as a suggestion.
    """
    tree = getattr(ds, "tree", None)
    if tree is None:
        return []
    file = "tree.nwk"
    try:
        topo = topology_of(tree)
        check_topology(topo, file)
    except InputError as exc:
        return problems_from_frame(exc.problems)
    try:
        labels_map = dataset_tree_labels(ds.taxa, topo.tips)
    except InputError as exc:
        return problems_from_frame(exc.problems)
    if accepted is None:
        accepted = ds.observations["taxon"]
    names = sorted({str(a) for a in accepted if a is not None and a == a})
    try:
        m = match_labels(topo, names, labels_map)
    except InputError as exc:
        return problems_from_frame(exc.problems)
    out = []
    for lab in m.taxa_without_tips:
        near = nearest_tip(lab, m.tips_without_data or topo.tips)
        hint = (
            f"did you mean tip {near!r}? fix the spelling or give a tree_label in taxa.csv"
            if near
            else "add the taxon to the tree or accept that tree-based fits leave it out"
        )
        out.append(
            Problem(
                "warning",
                file,
                None,
                None,
                lab,
                "taxon-without-tip",
                f"taxon {lab!r} has no tip in the tree; PGLS and other tree-based fits leave it "
                "out",
                hint,
            )
        )
    return out
