"""``comparo demo -o DIR``: copy the synthetic demo compilation out and run the report on it."""

from __future__ import annotations

import shutil
import sys
from pathlib import Path


def demo_source() -> Path:
    """Folder of the bundled synthetic demo compilation."""
    from comparo.catalog import package_folder

    return package_folder("demo_tables") / "synthetic_cyclers"


def run(args) -> int:
    from comparo.report import build_report

    out = Path(args.output)
    data = out / "synthetic_cyclers"
    if data.exists():
        shutil.rmtree(data)
    shutil.copytree(demo_source(), data)
    print(f"demo compilation (synthetic, invented data) copied to {data}")
    res = build_report(data, out, seed=args.seed, progress=sys.stderr.isatty() and not args.quiet)
    print(res.summary())
    return 0 if res.ok else 2
