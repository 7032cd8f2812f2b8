"""Synonyms of taxa.csv: ``taxon -> accepted_name`` links followed to their end.

Part of validation (:mod:`comparo.validation.tables` calls :func:`resolve_synonyms`); reads nothing
and imports only the problem type and the raw table.
"""

from __future__ import annotations

from comparo.base.errors import Problem
from comparo.reading.tables import RawTable


def resolve_synonyms(taxa: RawTable) -> tuple[dict[str, str], list[Problem]]:
    """Follow ``taxon -> accepted_name`` links of taxa.csv to their end.

    A chain (A -> B, B -> C) resolves to its last name (A and B both become C),
    with a warning naming the rows; a cycle (A -> B, B -> A, or longer) is an
    error naming every row in it, and its names are left unmapped. Returns the
    resolved map (only names whose accepted name differs from themselves) and
    the problems.
    """
    frame = taxa.frame
    if "taxon" not in frame or "accepted_name" not in frame:
        return {}, []
    row_of: dict[str, int] = {}
    step: dict[str, str] = {}
    for t, a, r in zip(frame["taxon"], frame["accepted_name"], taxa.rows, strict=True):
        row_of.setdefault(t, r)
        if t and a and a != t:
            step.setdefault(t, a)
    probs: list[Problem] = []
    end: dict[str, str | None] = {}  # name -> its chain's last name (None: in or into a cycle)
    depth: dict[str, int] = {}  # name -> links from it to that last name
    in_cycle: set[str] = set()
    for start in step:  # every name is walked once: linear in the number of links
        path: list[str] = []
        pos: dict[str, int] = {}
        x = start
        while x in step and x not in end and x not in pos:
            pos[x] = len(path)
            path.append(x)
            x = step[x]
        if x in pos:  # the next link returns into the path: a cycle
            loop = path[pos[x] :]
            in_cycle.update(loop)
            rows = [row_of[n] for n in loop]
            chain = " -> ".join(_few([*loop, loop[0]]))
            probs.append(
                Problem(
                    "error",
                    taxa.file,
                    rows[0],
                    "accepted_name",
                    step[loop[0]],
                    "synonym-cycle",
                    f"accepted names form a cycle: {chain} (rows {_rows(rows)})",
                    "one name of the cycle must be the accepted one: leave its accepted_name blank",
                )
            )
            final, base = None, 0
        else:
            final, base = (end[x], depth[x]) if x in end else (x, 0)
        for k, n in enumerate(reversed(path), start=1):
            end[n], depth[n] = final, base + k
    heads = set(step) - set(step.values())
    for start in step:  # report each chain once, from its first name
        if start in heads and end[start] is not None and depth[start] >= 2:
            path = [start]
            while len(path) < min(depth[start], _SHOWN):
                path.append(step[path[-1]])
            path.append(end[start])
            rows = [row_of[n] for n in path[:-1]]
            shown = (
                " -> ".join(path)
                if depth[start] < _SHOWN
                else (
                    " -> ".join(path[:-1])
                    + f" -> ... ({depth[start] - len(path) + 1} more) -> {path[-1]}"
                )
            )
            probs.append(
                Problem(
                    "warning",
                    taxa.file,
                    rows[0],
                    "accepted_name",
                    step[start],
                    "synonym-chain",
                    f"synonym chain {shown} (rows {_rows(rows, depth[start])}): every name in it "
                    f"is mapped to {end[start]!r}",
                    f"write {end[start]!r} as the accepted_name of each of these rows to silence "
                    "this",
                )
            )
    return {t: a for t, a in end.items() if a is not None and t not in in_cycle}, probs


_SHOWN = 8  # names of a long chain or cycle shown in its message


def _few(names: list[str]) -> list[str]:
    if len(names) <= _SHOWN:
        return names
    return [*names[: _SHOWN - 2], f"... ({len(names) - _SHOWN + 1} more)", names[-1]]


def _rows(rows: list[int], n: int | None = None) -> str:
    """Spreadsheet rows of a chain or cycle of *n* names (all of *rows* when not given)."""
    n = len(rows) if n is None else n
    if n <= _SHOWN and len(rows) == n:
        return ", ".join(map(str, rows))
    return ", ".join(map(str, rows[: _SHOWN - 1])) + f", ... ({n} rows)"
