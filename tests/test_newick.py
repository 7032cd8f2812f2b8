"""comparo.reading.newick, the fast reader of plain Newick, against dendropy (the reference
reader: an independent, general-purpose library) on random and hand-written trees."""

from __future__ import annotations

import subprocess
import sys

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from comparo import phylo
from comparo.phylo.trees import topology_of
from comparo.reading import newick
from comparo.reading.newick import DeferredTree, parse_newick, read_newick


def _dendropy_topology(text: str):
    trees = parse_newick(text if text.rstrip().endswith(";") else text.rstrip() + ";")
    assert len(trees) == 1
    return topology_of(trees[0])


def _same(text: str) -> None:
    ours = newick.parse(text)
    assert ours is not None, text
    ref = _dendropy_topology(text)
    assert ours.parent == ref.parent
    assert ours.length == ref.length
    assert ours.leaf == ref.leaf
    assert ours.inner_label == ref.inner_label
    assert ours.tips == ref.tips


HAND = [
    "(A:1,(B:1,C:2)x:2)root;",
    "('a b':1,'it''s':2,c_d:3)[&R];",
    "((A,B),C)",
    "(A:1,B:1)",
    "((A:1):1,B:2);",
    "(A:1e-3,B:.5)n:0;",
    "(A:1,B:1) ;[a comment]",
    "(\n  A:1.5,\n  B:2.5E+1\n)\t;\n",
    "([c]A[d]:1,B:[e]2);",
    "(A:+1,B:0,C:1.);",
    "((Homo_sapiens:1,'Pan troglodytes':1)95:1,Gorilla:2);",
    "A;",
    "(((((A:1):1):1):1,B:5):0.5);",
    "(A:1,B:2,C:3,D:4,E:5);",
    "('(odd),label':1,'x;y:z':2);",
    "(Ä:1,é_ñ:2,µ:3);",
]


@pytest.mark.parametrize("text", HAND)
def test_hand_written_trees_read_as_dendropy_reads_them(text):
    _same(text)


@pytest.mark.parametrize(
    "n,polytomy,ultrametric",
    [(2, 0.0, True), (50, 0.0, False), (300, 0.3, False), (2000, 0.1, True)],
)
def test_random_trees_read_as_dendropy_reads_them(n, polytomy, ultrametric):
    _same(phylo.random_newick(n, seed=n, ultrametric=ultrametric, polytomy=polytomy))


@pytest.mark.parametrize(
    "text",
    [
        "(A:1,B:1);(C:1,D:1);",  # two trees: dendropy counts them and comparo says so
        "(A B:1);",  # a space inside an unquoted label
        "A(B,C);",  # a label before the children
        "(A:1,B:1));",  # unbalanced
        "((A:1,B:1);",
        "(A:x,B:1);",  # a length that is not a number
        "(A:1:2,B:1);",
        "(A=1,B);",  # characters dendropy's tokenizer splits on
        '("A",B);',
        "(A:1,B:1)C D;",
        "(A,'B);",  # an unclosed quote
        "(A[unclosed,B);",
        "(A:1,B:1):;",
        "(A\xa0x:1,B:1);",  # whitespace dendropy keeps inside a label
        "(,B:1);",  # an empty leaf
        "(A:1,);",
        "(':':1,B:1);",  # dendropy reads a quoted ':' as punctuation
    ],
)
def test_anything_else_is_left_to_dendropy(text):
    assert newick.parse(text) is None


_LABEL = st.text(alphabet=st.sampled_from(list("ABCxyz_09 '(),:;é-")), min_size=0, max_size=6)


def _quote(label: str) -> str:
    plain = label and all(c not in " '(),:;[]" for c in label)
    return label if plain else "'" + label.replace("'", "''") + "'"


@st.composite
def _trees(draw, depth=0):
    label = draw(_LABEL)
    length = draw(
        st.one_of(st.none(), st.floats(0, 1e3, allow_nan=False).map(lambda v: f"{v:.6g}"))
    )
    tail = (_quote(label) if label else "") + ("" if length is None else f":{length}")
    if depth >= 3 or draw(st.booleans()):
        return tail
    kids = draw(st.lists(_trees(depth=depth + 1), min_size=1, max_size=4))
    return "(" + ",".join(kids) + ")" + tail


@settings(max_examples=150, deadline=None)
@given(_trees(), st.sampled_from(["", " ", "\n"]))
def test_property_generated_trees_read_as_dendropy_reads_them(body, pad):
    text = body if body.startswith("(") else f"({body},X:1)"
    text = text.replace(",", "," + pad) + ";"
    ours = newick.parse(text)
    try:
        ref = _dendropy_topology(text)
    except Exception:  # dendropy refuses it: so must the fast reader (dendropy then reports it)
        assert ours is None
        return
    if ours is None:  # a case left to dendropy
        return
    assert (ours.parent, ours.length, ours.leaf, ours.inner_label) == (
        ref.parent,
        ref.length,
        ref.leaf,
        ref.inner_label,
    )


def test_read_newick_defers_dendropy_until_the_tree_is_walked(tmp_path):
    path = tmp_path / "tree.nwk"
    path.write_text("((A:1,B:1):1,C:2);", encoding="utf-8")
    tree, text, probs = read_newick(path)
    assert isinstance(tree, DeferredTree) and not probs
    assert tree._tree is None
    assert tree.topology.tips == ["A", "B", "C"]
    assert [nd.label for nd in tree.leaf_node_iter()] == ["A", "B", "C"]  # dendropy's own API
    assert phylo.tip_labels(tree) == ("A", "B", "C")


def test_read_newick_still_reports_dendropy_syntax_errors(tmp_path):
    path = tmp_path / "tree.nwk"
    path.write_text("(A:1,B:1);(C:1,D:1);", encoding="utf-8")
    tree, _, probs = read_newick(path)
    assert tree is None and [p.rule for p in probs] == ["tree-count"]


# ------------------------------------------------------------------ the gate's tree rules


def _mutated_tree(seed: int) -> str:
    """A random tree whose tips partly carry the dataset's taxon names (as written,
    with underscores, or folded), sometimes with a duplicate tip, an edge without a
    length or a negative length: the cases the tree rules of ``check`` report."""
    import re

    import numpy as np

    rng = np.random.default_rng(seed)
    text = phylo.random_newick(
        int(rng.integers(3, 40)), seed, ultrametric=bool(rng.integers(2)), polytomy=0.2
    )
    names = [
        "Apis_mellifera",
        "Bombus terrestris",
        "'apis mellifera'",
        "Bombus_terrestris",
        "Musca_domestica",
        "Apis_melifera",
    ]
    tips = re.findall(r"t\d+(?=:)", text)
    for tip in rng.choice(tips, size=min(len(tips), int(rng.integers(0, 4))), replace=False):
        name = str(rng.choice(names))
        text = re.sub(
            rf"\b{tip}(?=:)", name if " " not in name or name.startswith("'") else f"'{name}'", text
        )
    kind = int(rng.integers(0, 5))
    if kind == 1:  # a duplicate tip
        text = re.sub(rf"\b{tips[0]}(?=:)", tips[-1], text) if len(tips) > 1 else text
    elif kind == 2:  # an edge without a length
        text = re.sub(r":[0-9.e-]+", "", text, count=1)
    elif kind == 3:  # a negative length
        text = re.sub(r":([0-9])", r":-\1", text, count=1)
    return text


@pytest.mark.parametrize("seed", range(40))
def test_tree_rules_of_check_on_the_fast_topology_equal_those_on_dendropys_tree(tmp_path, seed):
    """``check``'s tree rules (labels, duplicates, branch lengths, tips per taxon) read
    the topology the one-pass reader built, without building dendropy's tree; the
    problems are the same as on the tree dendropy (the reference reader) builds from
    the same text."""
    from support import write_dataset

    from comparo.validation.dataset import load

    folder = write_dataset(tmp_path / "ds")
    (folder / "tree.nwk").write_text(_mutated_tree(seed), encoding="utf-8")
    if seed % 3 == 0:
        (folder / "taxa.csv").write_text(
            "taxon,accepted_name,tree_label\nApis mellifera,,Apis_mellifera\nBombus terrestris,,\n",
            encoding="utf-8",
        )
    ds = load(folder, strict=False)
    if not isinstance(ds.tree, DeferredTree):  # a case the fast reader leaves to dendropy
        return
    ours = phylo.tree_problems(ds)
    assert ds.tree._tree is None  # dendropy's tree was not built
    ds.tree = ds.tree.tree  # the same text read by dendropy
    assert ours == phylo.tree_problems(ds)


def test_check_on_the_demo_does_not_import_dendropy(demo_copy):
    """The demo's tree is plain Newick: ``comparo check`` runs its tree rules on the
    one-pass reader's topology, and dendropy is never imported."""
    code = (
        "import sys\nfrom comparo.cli.main import main\n"
        f"rc = main(['check', {str(demo_copy)!r}, '--format', 'json'])\n"
        "print('RESULT', rc, 'dendropy' in sys.modules, 'comparo.phylo.tips' in sys.modules)\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert (
        proc.stdout.strip().splitlines()[-1] == "RESULT 0 False True"
    )  # tree rules ran, without dendropy


@settings(max_examples=300, deadline=None)
@given(
    st.lists(
        st.text(
            alphabet=st.sampled_from(list("aAbB_ -ÉéßΣσς\t\n\xa0\u2003\x1c\x85İ\x00")), max_size=6
        ),
        max_size=8,
    )
)
def test_folding_many_labels_at_once_equals_folding_each(labels):
    """Tip matching folds all labels in one pass over a joined string; the keys equal
    those of folding each label alone (str.split, str.casefold: Python's own rules)."""
    from comparo.phylo.trees import norm, norm_all

    assert norm_all(labels) == [norm(v) for v in labels]
