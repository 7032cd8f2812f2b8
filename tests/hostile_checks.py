"""Shared checks of the hostile-input tests: a refusal is exit 2 with the rule's words, no
traceback, the inputs byte-identical and nothing written outside what is allowed.

Imported by tests as ``from hostile_checks import ...`` (pytest puts tests/ on the path)."""

from __future__ import annotations

import os
import shutil
from pathlib import Path

from support import DEMO, run_main


def snapshot(folder: Path) -> dict[str, bytes | str]:
    """Every entry under *folder*: a file's bytes, or the kind of anything else."""
    out: dict[str, bytes | str] = {}
    for p in sorted(folder.rglob("*")):
        rel = str(p.relative_to(folder))
        if p.is_symlink():
            out[rel] = "link:" + os.readlink(p)
        elif p.is_file():
            out[rel] = p.read_bytes()
        else:
            out[rel] = "dir" if p.is_dir() else "special"
    return out


def refused(tmp_path: Path, argv: list[str], *words: str, allow: tuple[str, ...] = ()) -> str:
    """Run comparo on *argv* ({tmp} is *tmp_path*); assert exit 2 with *words* in the message,
    no traceback, and every entry under *tmp_path* unchanged (inputs byte-identical,
    nothing written but the names in *allow*). Returns what it printed."""
    before = snapshot(tmp_path)
    proc = run_main(*[a.format(tmp=tmp_path) for a in argv])
    assert proc.returncode == 2, (proc.stdout[-500:], proc.stderr[-2000:])
    said = proc.stderr + proc.stdout  # check lists problems on standard output
    assert "Traceback" not in said and "internal error" not in said, said
    for w in words:
        assert w in said, said[-2000:]
    after = snapshot(tmp_path)
    assert {k: v for k, v in after.items() if k not in allow} == before
    return said


def demo_copy(tmp_path: Path) -> Path:
    """A copy of the demo dataset at *tmp_path*/DS."""
    return Path(shutil.copytree(DEMO, tmp_path / "DS"))
