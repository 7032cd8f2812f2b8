"""``comparo demo -o DIR``: copy the synthetic demo compilation out and run the report on it.

The compilation goes to ``DIR/synthetic_cyclers``. Run again into the same folder, the
demo replaces only the files it wrote there before, and only while they are as it wrote
them (``DIR/.comparo-demo.json`` lists each with its SHA-256); a file changed since, or
added by the user, is never replaced or deleted: a changed one stops the run (exit 2)
before anything is written.
"""

from __future__ import annotations

import hashlib
import json
import os
import sys
from pathlib import Path

MANIFEST = ".comparo-demo.json"
FOLDER = "synthetic_cyclers"


def demo_source() -> Path:
    """Folder of the bundled synthetic demo compilation."""
    from comparo.base.catalog import package_folder

    return package_folder("demo_tables") / FOLDER


def _sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _earlier(out: Path) -> dict[str, str]:
    """Relative path -> SHA-256 of the files an earlier demo wrote into *out*."""
    try:
        files = json.loads((out / MANIFEST).read_text(encoding="utf-8")).get("files", {})
    except (OSError, ValueError, AttributeError):
        return {}
    return {str(k): str(v) for k, v in files.items()} if isinstance(files, dict) else {}


def copy_demo(out: Path) -> Path:
    """Copy the demo compilation into ``out/synthetic_cyclers`` (see the module docstring).

    Raises
    ------
    UsageError
        When the folder is a file or a symbolic link, or holds a changed copy of a demo file.
    """
    from comparo.base.errors import UsageError
    from comparo.base.outputs import atomic_write_bytes, atomic_write_text, dumps

    data = out / FOLDER
    if os.path.islink(data) or (os.path.lexists(data) and not data.is_dir()):
        what = "a symbolic link" if os.path.islink(data) else "a file"
        raise UsageError(
            f"{data} is {what}; the demo writes its compilation folder there: "
            "move it away, or choose another output folder"
        )
    src = demo_source()
    new = {
        f"{FOLDER}/{p.relative_to(src).as_posix()}": p.read_bytes()
        for p in sorted(src.rglob("*"))
        if p.is_file()
    }
    earlier = _earlier(out)
    changed = []
    for rel, content in new.items():
        dest = out / rel
        if not os.path.lexists(dest):
            continue
        if dest.is_symlink() or not dest.is_file():
            changed.append(f"{rel} (not a regular file)")
            continue
        have = _sha(dest.read_bytes())
        if have != _sha(content) and have != earlier.get(rel):
            changed.append(rel)
    if changed:
        raise UsageError(
            f"{out} holds demo files changed since comparo wrote them ({', '.join(changed)}); "
            "the demo never replaces them: move them away, or choose another output folder"
        )
    for rel, content in new.items():
        dest = out / rel
        if not (dest.is_file() and _sha(dest.read_bytes()) == _sha(content)):
            atomic_write_bytes(dest, content)
    atomic_write_text(
        out / MANIFEST, dumps({"files": {**earlier, **{r: _sha(c) for r, c in new.items()}}}) + "\n"
    )
    return data


def run(args) -> int:
    from comparo.pipeline import build_report

    out = Path(args.output)
    if os.path.islink(out) and not out.is_dir():
        from comparo.base.errors import UsageError

        raise UsageError(
            f"output {out} is a symbolic link to {os.path.realpath(out)}, which is not a folder; "
            "give a folder (new or existing) for the demo"
        )
    data = copy_demo(out)
    print(f"demo compilation (synthetic, invented data) copied to {data}")
    res = build_report(data, out, seed=args.seed, progress=sys.stderr.isatty() and not args.quiet)
    print(res.summary())
    return 0 if res.ok else 2
