"""Helpers of the hostile tests: a snapshot of every path under a folder, and which
paths changed outside the places a command was asked to write."""

from __future__ import annotations

import hashlib
import os
from pathlib import Path


def snapshot(root: Path) -> dict[str, str]:
    """Relative path -> SHA-256 of a file's bytes, ``link:TARGET`` for a symbolic link
    (never followed) or ``dir``, for everything under *root*."""
    seen: dict[str, str] = {}
    for dirpath, dirnames, filenames in os.walk(root):  # links to folders are not entered
        for name in dirnames + filenames:
            p = Path(dirpath) / name
            rel = p.relative_to(root).as_posix()
            if p.is_symlink():
                seen[rel] = "link:" + os.readlink(p)
            elif p.is_file():
                seen[rel] = hashlib.sha256(p.read_bytes()).hexdigest()
            else:
                seen[rel] = "dir" if p.is_dir() else "special"
    return seen


def changed_outside(
    before: dict[str, str], after: dict[str, str], allowed: tuple[str, ...] = ()
) -> list[str]:
    """Paths added, removed or changed between two snapshots that are not *allowed*
    (relative paths of outputs; everything under an allowed folder is allowed)."""
    diff = {k for k in set(before) | set(after) if before.get(k) != after.get(k)}
    return sorted(k for k in diff if not any(k == a or k.startswith(a + "/") for a in allowed))
