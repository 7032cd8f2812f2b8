"""The house rules of docs/architecture.md that a reviewer would otherwise check by eye:
lint and format at 100 columns, no private name imported across modules, and sizes a reader
can hold (no module over 800 lines, no function over 120). Common practice (the limits are
the project's own, stated in DEVELOPERS.md)."""

from __future__ import annotations

import ast
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
PACKAGE = REPO / "comparo"


def _ruff(*args: str) -> subprocess.CompletedProcess:
    exe = shutil.which("ruff")
    cmd = [exe] if exe else [sys.executable, "-m", "ruff"]
    return subprocess.run([*cmd, *args], cwd=REPO, capture_output=True, text=True)


def test_ruff_check_passes_with_the_line_length():
    done = _ruff("check", ".")
    assert done.returncode == 0, done.stdout + done.stderr


def test_ruff_format_leaves_every_file_as_it_is():
    done = _ruff("format", "--check", ".")
    assert done.returncode == 0, done.stdout + done.stderr


def _module(path: Path) -> str:
    return ".".join(("comparo", *path.relative_to(PACKAGE).with_suffix("").parts)).removesuffix(
        ".__init__"
    )


SOURCES = {_module(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def test_no_module_imports_another_modules_private_name():
    """``from comparo.x import _y`` in another module: what another module needs is public."""
    crossing = []
    for module, path in SOURCES.items():
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("comparo"):
                if node.module == module:
                    continue
                crossing += [
                    f"{module}: {node.module}.{a.name}"
                    for a in node.names
                    if a.name.startswith("_") and not a.name.startswith("__")
                ]
    assert not crossing, crossing


@pytest.mark.parametrize("module", sorted(SOURCES))
def test_sizes_a_reader_can_hold(module):
    text = SOURCES[module].read_text(encoding="utf-8")
    assert len(text.splitlines()) <= 800, f"{module}: over 800 lines"
    long = [
        f"{n.name} ({n.end_lineno - n.lineno + 1} lines)"
        for n in ast.walk(ast.parse(text))
        if isinstance(n, ast.FunctionDef | ast.AsyncFunctionDef)
        and n.end_lineno - n.lineno + 1 > 120
    ]
    assert not long, f"{module}: {long}"
