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
import sys
import threading
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path
from typing import Any

from comparo.base.errors import Problem, problem
from comparo.reading.text import decode_bytes, invisible_in, invisible_labels, invisible_names, nfc

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


# --------------------------------------------------------------------------- dendropy, files

_DEEP = 400  # nesting depth above which the Newick parser runs on a big stack
_parse_lock = threading.Lock()


def _nesting_depth(text: str) -> int:
    """Largest parenthesis nesting depth of *text* (quotes and comments ignored: an
    upper bound is all that is needed to size the parser's stack)."""
    import numpy as np

    b = np.frombuffer(text.encode("utf-8", "replace"), dtype=np.uint8)
    if b.size == 0:
        return 0
    step = (b == ord("(")).astype(np.int64) - (b == ord(")")).astype(np.int64)
    return int(np.cumsum(step).max(initial=0))


def parse_newick(text: str) -> Any:
    """Parse Newick *text* with dendropy into a TreeList; deep trees on a thread with a big stack.

    dendropy's Newick reader recurses once per nesting level, so a ladder
    (caterpillar) tree of depth 50,000 exceeds Python's default recursion limit.
    The parse then runs on its own thread with a stack and recursion limit sized
    to the nesting depth; the limits are restored afterwards.
    """
    import dendropy

    def parse() -> Any:
        return dendropy.TreeList.get(
            data=text,
            schema="newick",
            preserve_underscores=True,
            suppress_leaf_node_taxa=True,
            suppress_internal_node_taxa=True,
            rooting="force-rooted",
        )

    depth = _nesting_depth(text)
    if depth < _DEEP:
        return parse()
    out: dict[str, Any] = {}

    def work() -> None:
        try:
            out["trees"] = parse()
        except BaseException as exc:  # re-raised on the calling thread
            out["error"] = exc

    with _parse_lock:
        old_limit = sys.getrecursionlimit()
        old_stack = threading.stack_size()
        try:
            sys.setrecursionlimit(max(old_limit, 30 * depth + 10_000))
            threading.stack_size(int(min(2**31 - 1, max(64 * 2**20, 6_000 * depth))))
            worker = threading.Thread(target=work, name="comparo-newick")
            worker.start()
            worker.join()
        finally:
            threading.stack_size(old_stack)
            sys.setrecursionlimit(old_limit)
    if "error" in out:
        raise out["error"]
    return out["trees"]


class DeferredTree:
    """A tree read by :func:`comparo.reading.newick.parse`, built as a dendropy tree on first use.

    ``topology`` (pre-order lists) is there at once; any dendropy attribute
    (``seed_node``, ``leaf_nodes()``...) builds the dendropy tree from the same
    text with :func:`parse_newick` and answers from it, so code written for a
    dendropy tree keeps working while commands that never walk the tree skip
    dendropy altogether.
    """

    def __init__(self, text: str, topology: Any) -> None:
        self.text = text
        self.topology = topology
        self._tree = None

    @property
    def tree(self) -> Any:
        """The dendropy tree (built once)."""
        if self._tree is None:
            self._tree = parse_newick(self.text)[0]
        return self._tree

    def __getattr__(self, name: str) -> Any:
        if name.startswith("__") or name in ("text", "topology", "_tree"):
            raise AttributeError(name)
        return getattr(self.tree, name)


def read_newick_text(text: str, file: str) -> tuple[Any, list[Problem]]:
    """One tree from Newick *text*, the reader every path shares (dataset tree files,
    :func:`comparo.phylo.trees.read_tree`). Plain Newick is read by :func:`parse` (a
    :class:`DeferredTree`), anything else by dendropy; a missing final ``;`` is accepted.

    Problems (named after *file*): ``unicode-unified`` and ``invisible-character``
    (warnings: labels read in NFC and as they look), ``newick-syntax`` (unbalanced
    parentheses, anything dendropy cannot read), ``newick-depth`` and ``tree-count``
    (not exactly one tree). The tree is ``None`` when there is an error."""
    probs: list[Problem] = []
    if nfc(text) != text:
        text = nfc(text)
        probs.append(
            problem(
                file,
                "unicode-unified",
                "some tip labels are typed with decomposed accents; read in Unicode NFC "
                "(composed) so that they match the same names typed composed",
                "nothing to do unless two labels differed only in this way",
                severity="warning",
            )
        )
    if not text.isascii() and invisible_in(text):  # tips are matched to taxa as they look
        labels = invisible_labels(text)
        probs.append(
            problem(
                file,
                "invisible-character",
                f"tip label(s) {', '.join(map(repr, labels[:5]))}"
                f"{' ...' if len(labels) > 5 else ''} hold {invisible_names(''.join(labels))}, "
                "which shows as nothing; matched to taxa as they look",
                "nothing to do unless a label was meant to differ",
                value=labels[0],
                severity="warning",
            )
        )
    if text.count("(") != text.count(")"):
        return None, probs + [
            problem(
                file,
                "newick-syntax",
                f"unbalanced parentheses ({text.count('(')} '(' vs {text.count(')')} ')')",
                SYNTAX_HINT,
            )
        ]
    text = text if text.rstrip().endswith(";") else text.rstrip() + ";"
    topology = parse(text)
    if topology is not None:
        return DeferredTree(text, topology), probs
    try:
        trees = parse_newick(text)
    except RecursionError:
        return None, probs + [problem(file, "newick-depth", "tree is too deeply nested to parse")]
    except Exception as exc:
        msg = str(exc).splitlines()[0][:200] if str(exc) else type(exc).__name__
        return None, probs + [
            problem(file, "newick-syntax", f"cannot parse the Newick tree: {msg}", SYNTAX_HINT)
        ]
    if len(trees) != 1:
        return None, probs + [
            problem(
                file,
                "tree-count",
                f"the file holds {len(trees)} trees; exactly one is needed",
                "keep one tree in the file",
            )
        ]
    return trees[0], probs


SYNTAX_HINT = "check parentheses, commas, ':' before each length and the final ';'"


def read_newick(path: Path, name: str | None = None) -> tuple[Any, str | None, list[Problem]]:
    """Read a Newick tree file (encodings as :func:`comparo.reading.text.decode_bytes`) with
    :func:`read_newick_text`. Returns (tree or None, text or None, problems)."""
    file = name or path.name
    try:
        data = path.read_bytes()
    except OSError as exc:
        return None, None, [problem(file, "file-read", f"cannot read file ({exc.strerror})")]
    text, probs = decode_bytes(data, file)
    if text is None:
        return None, None, probs
    if not text.strip():
        return None, None, probs + [problem(file, "empty-file", "tree file is empty")]
    tree, more = read_newick_text(text, file)
    return tree, nfc(text), probs + more
