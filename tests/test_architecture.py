"""The import direction of docs/architecture.md, checked on the source: every import, lazy
ones inside functions and relative ones included. Data flow one way through the rooms,

    base -> reading -> validation -> traces -> curation -> derivation -> phylo -> fitting
         -> history -> report -> (comparo, comparo.pipeline) -> cli

and a room may import only the rooms to its left."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1] / "comparo"

# the rooms, in the order data flow through them (docs/architecture.md, "Who may import whom")
ORDER = (
    "base",
    "reading",
    "validation",
    "traces",
    "curation",
    "derivation",
    "phylo",
    "fitting",
    "history",
    "report",
    "comparo",  # the package's own modules: the public API and the pipeline
    "cli",
)
# today's imports against the order; the redesign empties this list
KNOWN: set[tuple[str, str]] = set()


def _module(path: Path) -> str:
    parts = ("comparo", *path.relative_to(ROOT).with_suffix("").parts)
    return ".".join(parts).removesuffix(".__init__")


def _room(module: str) -> str:
    parts = module.split(".")
    if module == "comparo.__main__":
        return "cli"
    if len(parts) == 1 or (len(parts) == 2 and parts[1] not in ORDER):
        return "comparo"
    return parts[1]


def _resolve(module: str, node: ast.ImportFrom) -> str:
    """The absolute name a relative ``from . import x`` points at."""
    if node.level == 0:
        return node.module or ""
    package = module.split(".")
    is_package = (ROOT / Path(*package[1:]) / "__init__.py").exists()
    base = package if is_package else package[:-1]
    base = base[: len(base) - (node.level - 1)]
    return ".".join([*base, node.module] if node.module else base)


def _targets() -> dict[str, set[str]]:
    """module -> the comparo modules it imports, anywhere in the file."""
    out: dict[str, set[str]] = {}
    for path in sorted(ROOT.rglob("*.py")):
        module = _module(path)
        found: set[str] = set()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom):
                target = _resolve(module, node)
                if target == "comparo":
                    found |= {f"comparo.{a.name}" for a in node.names}
                elif target.startswith("comparo."):
                    found.add(target)
                    found |= {
                        f"{target}.{a.name}"
                        for a in node.names
                        if (ROOT / Path(*target.split(".")[1:]) / f"{a.name}.py").exists()
                    }
            elif isinstance(node, ast.Import):
                found |= {a.name for a in node.names if a.name.startswith("comparo.")}
        out[module] = found
    return out


TARGETS = _targets()


def test_every_room_is_in_the_order():
    rooms = {_room(m) for m in TARGETS}
    assert rooms <= set(ORDER), rooms - set(ORDER)
    assert "comparo.fitting.source_sensitivity" in TARGETS["comparo.cli.commands.fit"]  # lazy seen


@pytest.mark.parametrize("module", sorted(TARGETS))
def test_imports_run_one_way(module):
    here = ORDER.index(_room(module))
    bad = {
        t
        for t in TARGETS[module]
        if ORDER.index(_room(t)) > here and (module, _room(t)) not in KNOWN
    }
    assert not bad, f"{module} imports {sorted(bad)}, against docs/architecture.md"


def test_the_known_exceptions_are_still_needed():
    """An exception nobody uses any more leaves the list."""
    used = {(m, _room(t)) for m, ts in TARGETS.items() for t in ts}
    assert KNOWN <= used, KNOWN - used


def _cycle(graph: dict[str, set[str]]) -> list[str]:
    """One cycle of *graph* (module -> modules it imports), as the list of its modules with
    the first repeated at the end; empty when there is none."""
    import graphlib

    try:
        graphlib.TopologicalSorter(graph).prepare()
    except graphlib.CycleError as exc:
        return list(exc.args[1])
    return []


def test_the_cycle_finder_finds_a_cycle():
    """The check below can fail: a three-module ring is found, a chain is not."""
    assert sorted(set(_cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}))) == ["a", "b", "c"]
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": set()}) == []


def test_no_import_cycle():
    """The module-level import graph (every import anywhere in a file, lazy ones included,
    as :func:`_targets` computes it) has no cycle, within rooms too: data flow one way."""
    graph = {m: {t for t in ts if t in TARGETS and t != m} for m, ts in TARGETS.items()}
    cycle = _cycle(graph)
    assert not cycle, " -> ".join(cycle)


def test_only_the_cli_reaches_the_commands():
    users = {m for m, ts in TARGETS.items() if any(t.startswith("comparo.cli") for t in ts)}
    assert {u for u in users if _room(u) != "cli"} == set(), users


def test_the_command_line_starts_without_heavy_libraries():
    """``comparo --help`` stays fast: importing the package and the CLI loads no numerical
    library."""
    heavy = ("numpy", "pandas", "scipy", "matplotlib", "statsmodels", "dendropy", "pint")
    code = (
        "import sys, comparo, comparo.cli\n"
        f"heavy = [m for m in {heavy!r} if m in sys.modules]\n"
        "assert not heavy, heavy\n"
    )
    subprocess.run([sys.executable, "-c", code], check=True)
