"""A fast reader for plain Newick text: the topology as flat lists, in pre-order.

dendropy is comparo's Newick reader of record: it reports syntax errors with
line and column and builds the tree objects plots and fits walk. Building
those objects costs about 40 µs per node (4 s for a 100,000-tip tree), and the
import of dendropy alone is a noticeable part of a command's start-up. This
module reads the common case, one tree of labels, branch lengths, quoted
labels and comments, in one regular-expression pass and returns ``None`` for
anything else (two trees, a stray token, a label in an odd place), so the
caller falls back to dendropy for that text and its error messages.

The result matches what comparo asks dendropy for (``preserve_underscores``,
labels on the nodes, comments ignored): the tests compare both on random and
hand-written trees.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import cached_property

_TOKEN = re.compile(
    r"""[ \t\n\r]*(?:
    (?P<punct>[(),;:])
    | '(?P<quoted>(?:[^']|'')*)'
    | \[(?P<comment>[^\[\]]*)\]
    | (?P<word>[^\s()\[\]':;,]+)
    )""",
    re.VERBOSE,
)
_SPLIT = re.compile(r"([(),;:])")
_SPACE = re.compile(r"\s")  # whitespace inside a word: dendropy splits on four kinds only
_ODD = re.compile(r'[{}="]')
_PUNCT = frozenset('(),;:{}="')
_NUMBER = re.compile(r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?\Z")


@dataclass(frozen=True, eq=False)
class Topology:
    """One rooted tree as pre-order lists (children in the order written).

    ``parent[i]`` is the index of node ``i``'s parent (-1 at the root);
    ``length[i]`` the length of the edge above it (``None`` when not written);
    ``leaf`` maps each leaf's index to its label (``None`` when it has none);
    ``inner_label[i]`` is the label of an internal node (``None`` for leaves and
    unlabelled nodes). Lengths are in the tree's branch-length units.
    """

    parent: list[int]
    length: list[float | None]
    leaf: dict[int, str | None]
    inner_label: list[str | None]

    @cached_property
    def tips(self) -> list[str]:
        """Leaf labels in pre-order (computed once; do not modify the list)."""
        return [str(v) for v in self.leaf.values()]

    @cached_property
    def node_of(self) -> dict[str, int]:
        """Leaf label -> node index (the last leaf of a label written twice)."""
        return {str(lab): i for i, lab in self.leaf.items()}


def _plain_words(text: str) -> list[str] | None:
    """Text without quotes or comments split into [word, punct, word, ..., punct, word]
    (words may be empty); ``None`` when a word holds white space."""
    pieces = _SPLIT.split(text)
    if _SPACE.search(text):
        words = [w.strip(" \t\n\r") for w in pieces[0::2]]
        if any(_SPACE.search(w) for w in words if w):
            return None
        pieces[0::2] = words
    return pieces


def _tokens(text: str) -> list[tuple[str, str]] | None:
    """(kind, text) pairs: ``punct``, ``word``, ``quoted`` (quotes removed, '' kept) or
    ``comment``; ``None`` when some text is not a token."""
    if _ODD.search(text):  # characters dendropy's tokenizer treats as its own tokens
        return None
    if "'" not in text and "[" not in text:  # the common case: split on punctuation in C
        pieces = _plain_words(text)
        if pieces is None:
            return None
        words = pieces[0::2]
        out = []
        append = out.append
        for word, punct in zip(words, pieces[1::2], strict=False):  # one more word than punctuation
            if word:
                append(("word", word))
            append(("punct", punct))
        if words[-1]:
            append(("word", words[-1]))
        return out
    pos = 0
    out = []
    for m in _TOKEN.finditer(text):
        if m.start() != pos:
            return None
        pos = m.end()
        out.append((m.lastgroup, m.group(m.lastindex)))
    return None if text[pos:].strip(" \t\n\r") else out


def parse(text: str) -> Topology | None:
    """The topology of one Newick tree, or ``None`` when *text* is not plain Newick
    this reader is sure of (the caller then uses dendropy). A missing final ``;``
    is accepted; the length of a root edge is not kept (``length[0]`` is ``None``)."""
    if "'" not in text and "[" not in text and not _ODD.search(text):
        pieces = _plain_words(text)
        return None if pieces is None else _parse_plain(pieces)
    tokens = _tokens(text)
    if tokens is None:
        return None
    parent = [-1]
    length: list[float | None] = [None]
    label: list[str | None] = [None]
    n_child = [0]
    cur = 0
    expect_length = False
    ended = False
    for kind, value in tokens:
        if kind == "comment":
            continue
        if ended:
            return None  # a second tree or text after the ';'
        if expect_length:
            if kind != "word" or not _NUMBER.match(value) or length[cur] is not None:
                return None
            length[cur] = float(value)
            expect_length = False
        elif kind == "punct":
            if value == "(" or value == ",":
                cur = _open(
                    value, cur, parent, n_child, label[cur] is not None or length[cur] is not None
                )
                if cur < 0:
                    return None
                length.append(None)
                label.append(None)
            elif value == ")":
                cur = parent[cur]
                if cur < 0:
                    return None
            elif value == ":":
                expect_length = True
            elif parent[cur] >= 0:  # ';' before the tree is closed
                return None
            else:
                ended = True
        else:
            if label[cur] is not None or length[cur] is not None:
                return None
            if kind == "quoted" and value in _PUNCT:
                return None  # dendropy reads a quoted lone ':' or ',' as the punctuation itself
            label[cur] = value.replace("''", "'") if kind == "quoted" else value
    if expect_length or parent[cur] >= 0:
        return None
    return _finish(parent, length, label, n_child)


def _open(p: str, cur: int, parent: list[int], n_child: list[int], taken: bool) -> int:
    """Add the node that *p* (``(`` or ``,``) opens at node *cur* (*taken*: *cur* already
    has a label or a length) and return its index; -1 where no tree can have it."""
    if p == "(":
        if taken or n_child[cur]:
            return -1
        up = cur
    else:
        up = parent[cur]
        if up < 0:
            return -1
    parent.append(up)
    n_child.append(0)
    n_child[up] += 1
    return len(parent) - 1


def _finish(
    parent: list[int], length: list[float | None], label: list[str | None], n_child: list[int]
) -> Topology | None:
    """The topology of the nodes read (the root edge's length dropped), or ``None`` when a
    leaf has no label."""
    length[0] = None
    leaf = {i: label[i] for i in range(len(parent)) if n_child[i] == 0}
    if any(lab is None for lab in leaf.values()):
        return None  # dendropy reads empty leaves its own way; it also reports them
    inner = [None if n_child[i] == 0 else label[i] for i in range(len(parent))]
    return Topology(parent, length, leaf, inner)


_NUMBERS = re.compile(r"[0-9.eE+\n-]*")  # the characters of the lengths (the grammar is float's)


def _parse_plain(pieces: list[str]) -> Topology | None:
    """:func:`parse` for text without quotes or comments, from [word, punct, word, ...]:
    the same rules, one step per punctuation mark with the word after it."""
    parent = [-1]
    label: list[str | None] = [pieces[0] or None]
    has_len = [False]
    n_child = [0]
    len_node: list[int] = []
    len_word: list[str] = []
    cur = 0
    ended = False
    for j in range(1, len(pieces), 2):
        p = pieces[j]
        w = pieces[j + 1]
        if ended:
            return None  # a second tree or text after the ';'
        if p == ":":
            if not w or has_len[cur]:
                return None
            has_len[cur] = True
            len_node.append(cur)
            len_word.append(w)
            continue
        if p == "(" or p == ",":
            cur = _open(p, cur, parent, n_child, label[cur] is not None or has_len[cur])
            if cur < 0:
                return None
            label.append(None)
            has_len.append(False)
        elif p == ")":
            cur = parent[cur]
            if cur < 0:
                return None
        else:  # ';'
            if parent[cur] >= 0:
                return None  # before the tree is closed
            ended = True
        if w:
            if ended or label[cur] is not None or has_len[cur]:
                return None
            label[cur] = w
    if parent[cur] >= 0:
        return None
    if len_word and not _NUMBERS.fullmatch("\n".join(len_word)):
        return None
    try:
        values = list(
            map(float, len_word)
        )  # with only those characters, float's grammar is _NUMBER's
    except ValueError:
        return None
    length: list[float | None] = [None] * len(parent)
    for node, v in zip(len_node, values, strict=True):
        length[node] = v
    return _finish(parent, length, label, n_child)
