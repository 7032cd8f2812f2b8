"""``comparo merge A B --base BASE`` of two edited copies of a 100,000-row compilation against
``comparo table`` on one of them.

Run: ``python tests/benchmarks/bench_merge.py [rows]``. BASE is the seeded table of
bench_check.py; each copy edits its own, disjoint share of the rows (so the merge has no
conflict): 1% of the values changed, 0.5% of the micrometre values rewritten in millimetres
(unit-only), 0.5% of the rows removed and 0.5% added (new obs_ids). Both commands run as a
user runs them: a fresh interpreter each, whole process, output written. Target
(docs/versions.md): merge at most 3x table.
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


def _edited_copy(base: Path, copy: Path, rows: np.ndarray, tag: str) -> dict[str, int]:
    """Edit only the rows at positions *rows* (their share of the permutation) of BASE."""
    copy.mkdir()
    (copy / "sources.csv").write_bytes((base / "sources.csv").read_bytes())
    obs = pd.read_csv(base / "observations.csv", dtype=str, keep_default_na=False)
    n = len(obs)
    k = lambda share: int(share * n)  # noqa: E731
    changed, rest = rows[: k(0.01)], rows[k(0.01) :]
    obs.loc[changed, "value"] = [f"{float(v) * 1.1:.6g}" for v in obs.loc[changed, "value"]]
    um = rest[(obs.loc[rest, "unit"] == "um").to_numpy()][: k(0.005)]
    obs.loc[um, "value"] = [f"{float(v) / 1000:.9g}" for v in obs.loc[um, "value"]]
    obs.loc[um, "unit"] = "mm"
    rest = np.setdiff1d(rest, um)
    removed, template = rest[: k(0.005)], rest[k(0.005) : k(0.01)]
    added = obs.loc[template].copy()
    added["obs_id"] = [f"{tag}{i}" for i in range(len(added))]
    added["locator"] = "Table 99"
    obs = pd.concat([obs.drop(index=removed), added], ignore_index=True)
    obs.to_csv(copy / "observations.csv", index=False)
    return {
        "changed": len(changed),
        "unit_only": len(um),
        "removed": len(removed),
        "added": len(added),
    }


def _timed(*args: str) -> tuple[float, int, str]:
    t0 = time.perf_counter()
    done = subprocess.run(
        [sys.executable, "-m", "comparo", *args], capture_output=True, check=False, text=True
    )
    return time.perf_counter() - t0, done.returncode, done.stderr[-2000:]


def main(rows: int = 100_000) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        base = write_table(tmp / "base", rows)
        order = np.random.default_rng(7).permutation(rows)
        half = rows // 2
        edits_a = _edited_copy(base, tmp / "a", order[:half], "new-a-")
        edits_b = _edited_copy(base, tmp / "b", order[half:], "new-b-")
        t_table, rc_table, _ = _timed("table", str(tmp / "a"), "-o", str(tmp / "table.csv"))
        t_merge, rc_merge, err = _timed(
            "merge", str(tmp / "a"), str(tmp / "b"), "--base", str(base), "-o", str(tmp / "out")
        )
        merged = (
            len(pd.read_csv(tmp / "out" / "observations.csv", usecols=["obs_id"]))
            if rc_merge == 0
            else None
        )
    expected = rows - edits_a["removed"] - edits_b["removed"] + edits_a["added"] + edits_b["added"]
    print(f"merge of two edited copies of a {rows}-row compilation with its base")
    print(f"  edits A: {edits_a}; edits B: {edits_b}")
    print(f"  merged rows: {merged} (expected {expected})")
    if rc_merge != 0:
        print(err)
    print(f"  comparo table (copy A):        {t_table:.2f} s (exit {rc_table})")
    print(
        f"  comparo merge A B --base BASE: {t_merge:.2f} s (exit {rc_merge})   "
        f"ratio {t_merge / t_table:.2f}x (target <= 3x)"
    )


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:]))
