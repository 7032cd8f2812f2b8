"""The import direction of docs/architecture.md, checked on the source (every import, lazy
ones inside functions included): data flow read -> validate -> harmonise -> per-taxon ->
derive -> fit -> flag -> report, the command line on top."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1] / "comparo"

FOUNDATIONS = ("errors", "units", "catalog", "csvsafe", "bounds", "outputs", "display", "jsonsafe", "quantiles")
ABOVE_READ = ("validate", "dataset", "curate", "provenance", "derivation", "phylo", "lines", "flags",
              "reliance", "plots", "report", "export", "commands", "cli")
PRESENTATION = ("plots", "report", "export", "commands", "cli")

# room -> rooms it must never import (see docs/architecture.md, "Who may import whom")
FORBIDDEN = {
    **{f: ("io", *ABOVE_READ) for f in FOUNDATIONS},
    "io": ABOVE_READ,
    "validate": ABOVE_READ[1:],
    "dataset": ABOVE_READ[2:],
    "derivation": ("phylo", "lines", "flags", "reliance", *PRESENTATION),
    "phylo": ("lines", "reliance", *PRESENTATION),
    "flags": ("lines", "reliance", *PRESENTATION),
    "lines": ("reliance", *PRESENTATION),
    "reliance": PRESENTATION,
    # two versions compared: fits through lines, never the presentation rooms
    "versions": PRESENTATION,
    "merging": PRESENTATION,
    "config": ("reliance", *PRESENTATION),
    "loops": ("io", "traces", *ABOVE_READ),
    "traces": ("derivation", "phylo", "lines", "flags", "reliance", *PRESENTATION),
    "plots": ("report", "export", "commands", "cli"),
    "report": ("export", "commands", "cli"),
    "export": ("report", "commands", "cli"),
    # reading plain Newick: beside io, below every rule
    "newick": ABOVE_READ,
    # synonym chains and cycles: a part of validation
    "synonyms": ABOVE_READ,
    # the temperature policy (settings, their check, a fit's summary): a part of validation
    "thermal": ABOVE_READ,
    # the curator's spreadsheets: read and validate, never analyse
    "wide": ("derivation", "phylo", "lines", "flags", "reliance", *PRESENTATION),
    "importer": ("derivation", "phylo", "lines", "flags", "reliance", *PRESENTATION),
    "template": ("derivation", "phylo", "lines", "flags", "reliance", *PRESENTATION),
    # the generator of the unit facts: reads the SI units of the derivation and the traces
    "unitfacts": ("phylo", "lines", "flags", "reliance", "curate", *PRESENTATION),
}
# the one sanctioned upward import: FitResult.plot draws with the report's figure code
ALLOWED = {("comparo.lines.result", "plots")}


def _room(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "comparo"


def _imports() -> dict[str, set[str]]:
    """module -> rooms of comparo it imports (anywhere in the file)."""
    out: dict[str, set[str]] = {}
    for path in sorted(ROOT.rglob("*.py")):
        module = ".".join(("comparo", *path.relative_to(ROOT).with_suffix("").parts)).removesuffix(".__init__")
        rooms: set[str] = set()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
                if node.module == "comparo":
                    rooms |= {a.name for a in node.names}
                elif node.module.startswith("comparo."):
                    rooms.add(_room(node.module))
            elif isinstance(node, ast.Import):
                rooms |= {_room(a.name) for a in node.names if a.name.startswith("comparo.")}
        rooms.discard(_room(module))
        out[module] = rooms
    return out


IMPORTS = _imports()


def test_the_rules_cover_every_room():
    assert {"lines", "phylo", "reliance"} <= IMPORTS["comparo.commands.fit"]  # the scan sees lazy imports
    rooms = {_room(m) for m in IMPORTS} - {"comparo", "__main__"}
    assert rooms <= set(FORBIDDEN) | {"curate", "config", "provenance", "commands", "cli"}, rooms - set(FORBIDDEN)


@pytest.mark.parametrize("module", sorted(IMPORTS))
def test_imports_run_one_way(module):
    bad = {r for r in IMPORTS[module] & set(FORBIDDEN.get(_room(module), ())) if (module, r) not in ALLOWED}
    assert not bad, f"{module} imports {sorted(bad)}, against docs/architecture.md"


def test_reading_imports_neither_validation_nor_the_dataset():
    io_rooms = IMPORTS["comparo.io"]
    assert "validate" not in io_rooms and "dataset" not in io_rooms


def test_only_the_cli_reaches_the_commands():
    users = {m for m, rooms in IMPORTS.items() if "commands" in rooms and not m.startswith("comparo.commands")}
    assert users <= {"comparo.cli"}, users


def test_the_command_line_starts_without_heavy_libraries():
    """``comparo --help`` stays fast: importing the package and the CLI loads no numerical library."""
    code = ("import sys, comparo, comparo.cli\n"
            "heavy = [m for m in ('numpy', 'pandas', 'scipy', 'matplotlib', 'statsmodels', 'dendropy', 'pint') if m in sys.modules]\n"
            "assert not heavy, heavy\n")
    subprocess.run([sys.executable, "-c", code], check=True)
