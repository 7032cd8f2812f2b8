"""``comparo demo -o DIR``: copy the synthetic demo compilation out and analyse it."""

from __future__ import annotations

import shutil
from pathlib import Path

from comparo.commands._common import atomic_write_text, dumps


def demo_source() -> Path:
    """Folder of the bundled synthetic demo compilation."""
    from comparo.catalog import package_folder

    return package_folder("demo_tables") / "synthetic_cyclers"


def run(args) -> int:
    from comparo.commands.check import render_problems
    from comparo.csvsafe import to_csv
    from comparo.curate import per_taxon, review
    from comparo.provenance import audit, lineage

    out = Path(args.output)
    data = out / "synthetic_cyclers"
    if data.exists():
        shutil.rmtree(data)
    shutil.copytree(demo_source(), data)
    print(f"demo compilation (synthetic, invented data) copied to {data}")
    result = review(data)
    if not result.ok:  # pragma: no cover - the shipped demo is valid (tested)
        render_problems(result)
        return 2
    ds = result.dataset
    render_problems(result)
    tables = out / "tables"
    atomic_write_text(tables / "problems.csv", to_csv(result.problems))
    atomic_write_text(tables / "per_taxon.csv", to_csv(per_taxon(ds)))
    atomic_write_text(tables / "lineage.csv", to_csv(lineage(ds)))
    report = audit(ds)
    atomic_write_text(tables / "audit.json", dumps(report.to_dict()))
    print(report.summary())
    print(f"tables written to {tables}")
    return 0
