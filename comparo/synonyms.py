"""Synonyms of taxa.csv: ``taxon -> accepted_name`` links followed to their end.

Part of validation (:mod:`comparo.validate` calls :func:`resolve_synonyms`); reads nothing
and imports only the problem type and the raw table.
"""

from __future__ import annotations

from comparo.errors import Problem
from comparo.io import RawTable


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
    resolved: dict[str, str] = {}
    in_cycle: set[str] = set()
    for start in step:
        path = [start]
        seen = {start}
        while path[-1] in step and step[path[-1]] not in seen:
            nxt = step[path[-1]]
            path.append(nxt)
            seen.add(nxt)
        if path[-1] in step:  # the next link returns into the path: a cycle
            loop = path[path.index(step[path[-1]]):]
            if loop[0] not in in_cycle:
                in_cycle.update(loop)
                rows = [row_of[n] for n in loop]
                chain = " -> ".join([*loop, loop[0]])
                probs.append(Problem("error", taxa.file, rows[0], "accepted_name", step[loop[0]], "synonym-cycle",
                                     f"accepted names form a cycle: {chain} (rows {', '.join(map(str, rows))})",
                                     "one name of the cycle must be the accepted one: leave its accepted_name blank"))
            continue
        resolved[start] = path[-1]
        if len(path) > 2 and start not in step.values():  # report each chain once, from its first name
            rows = [row_of[n] for n in path[:-1]]
            probs.append(Problem("warning", taxa.file, rows[0], "accepted_name", step[start], "synonym-chain",
                                 f"synonym chain {' -> '.join(path)} (rows {', '.join(map(str, rows))}): every name in it is mapped to {path[-1]!r}",
                                 f"write {path[-1]!r} as the accepted_name of each of these rows to silence this"))
    for name in in_cycle:
        resolved.pop(name, None)
    return {t: a for t, a in resolved.items() if t not in in_cycle}, probs
