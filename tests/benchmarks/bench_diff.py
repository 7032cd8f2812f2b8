"""``comparo diff`` of two versions of a 100,000-row compilation against ``comparo table`` on one.

Run: ``python tests/benchmarks/bench_diff.py [rows]``. The old version is the seeded table of
bench_check.py; the new one has 1% of the values changed, 1% of the micrometre values rewritten
in millimetres (unit-only), 0.5% of the rows removed, 0.5% added and 0.5% of the obs_ids
renamed. Both commands run as a user runs them: a fresh interpreter each, whole process, output
to a file. Target (docs/versions.md): diff at most 3x table.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _bigtable import write_table  # noqa: E402


def _new_version(old: Path, new: Path, seed: int = 5) -> dict[str, int]:
    rng = np.random.default_rng(seed)
    new.mkdir()
    (new / "sources.csv").write_bytes((old / "sources.csv").read_bytes())
    obs = pd.read_csv(old / "observations.csv", dtype=str, keep_default_na=False)
    n = len(obs)
    pick = lambda share: rng.choice(n, int(share * n), replace=False)  # noqa: E731
    changed = pick(0.01)
    obs.loc[changed, "value"] = [f"{float(v) * 1.1:.6g}" for v in obs.loc[changed, "value"]]
    um = np.flatnonzero((obs["unit"] == "um").to_numpy())
    unit_only = rng.choice(um, min(len(um), int(0.01 * n)), replace=False)
    obs.loc[unit_only, "value"] = [f"{float(v) / 1000:.9g}" for v in obs.loc[unit_only, "value"]]
    obs.loc[unit_only, "unit"] = "mm"
    renamed = pick(0.005)
    obs.loc[renamed, "obs_id"] = [f"R{i}" for i in renamed]
    removed = pick(0.005)
    added = obs.iloc[removed].copy()
    added["obs_id"] = [f"A{i}" for i in range(len(added))]
    added["locator"] = "Table 99"
    obs = pd.concat([obs.drop(index=removed), added], ignore_index=True)
    obs.to_csv(new / "observations.csv", index=False)
    return {
        "changed": len(changed),
        "unit_only": len(unit_only),
        "renamed": len(renamed),
        "removed": len(removed),
        "added": len(added),
    }


def _timed(*args: str) -> tuple[float, int]:
    t0 = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-m", "comparo", *args], capture_output=True, check=False
    )
    return time.perf_counter() - t0, done.returncode


def main(rows: int = 100_000) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        old = write_table(Path(tmp) / "old", rows)
        edits = _new_version(old, Path(tmp) / "new")
        out = Path(tmp) / "out"
        out.mkdir()
        t_table, rc_table = _timed("table", str(old), "-o", str(out / "table.csv"))
        t_diff, rc_diff = _timed(
            "diff",
            str(old),
            str(Path(tmp) / "new"),
            "--format",
            "json",
            "-o",
            str(out / "diff.json"),
        )
        import json

        result = json.loads((out / "diff.json").read_text(encoding="utf-8"))
    kinds = pd.Series([c["kind"] for c in result["rows"]["changed"]]).value_counts().to_dict()
    print(f"diff of two versions, {rows} rows; edits made: {edits}")
    print(
        f"  found: {len(result['rows']['added'])} added, {len(result['rows']['removed'])} removed, "
        f"changed cells by kind {kinds}; {len(result['taxa'])} per-taxon values moved"
    )
    print(f"  comparo table (one version):   {t_table:.2f} s (exit {rc_table})")
    print(
        f"  comparo diff --format json:    {t_diff:.2f} s (exit {rc_diff})   ratio "
        f"{t_diff / t_table:.2f}x"
        " (target <= 3x)"
    )


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:]))
