"""Provenance audit of a 100,000-row table against a plain pandas read of the same file.

Run: ``python tests/benchmarks/bench_audit.py [rows]``. Same seeded table as
bench_check.py. Times, in this run: baseline ``pandas.read_csv``; ``comparo.load``
(read + validate); ``comparo.audit`` (harmonise, duplicates, unit slips, conflicts,
per-taxon table, coverage, trust grades); and ``comparo audit --format json`` in a
fresh interpreter.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _bigtable import write_table  # noqa: E402


def main(rows: int = 100_000) -> None:
    from comparo.curation.provenance import audit
    from comparo.validation.dataset import load

    with tempfile.TemporaryDirectory() as tmp:
        folder = write_table(Path(tmp) / "big", rows)
        audit(load(write_table(Path(tmp) / "warm", 50), strict=False))  # imports outside the timing
        t0 = time.perf_counter()
        pd.read_csv(folder / "observations.csv", dtype=str, keep_default_na=False)
        base = time.perf_counter() - t0
        t0 = time.perf_counter()
        ds = load(folder, strict=False)
        t_load = time.perf_counter() - t0
        t0 = time.perf_counter()
        rep = audit(ds)
        t_audit = time.perf_counter() - t0
        t0 = time.perf_counter()
        subprocess.run(
            [sys.executable, "-m", "comparo", "audit", str(folder), "--format", "json"],
            capture_output=True,
            check=False,
        )
        t_cli = time.perf_counter() - t0
    assert rep.balanced
    print(
        f"audit, {rows} rows: read {rep.rows_read}, used {rep.rows_used}, merged "
        f"{rep.rows_merged}, excluded {len(rep.rows_excluded)}; {len(rep.coverage)} taxa, "
        f"{len(rep.conflicts)} conflicts"
    )
    print(f"  baseline pandas.read_csv (text): {base:.2f} s")
    print(f"  comparo.load (read + validate):  {t_load:.2f} s   ratio {t_load / base:.1f}x")
    print(f"  comparo.audit (after load):      {t_audit:.2f} s   ratio {t_audit / base:.1f}x")
    print(
        f"  load + audit:                    {t_load + t_audit:.2f} s   ratio "
        f"{(t_load + t_audit) / base:.1f}x"
    )
    print(
        f"  comparo audit --format json:     {t_cli:.2f} s   ratio {t_cli / base:.1f}x (fresh "
        "interpreter)"
    )


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:]))
