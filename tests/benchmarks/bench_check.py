"""`comparo check` on a 100,000-row VALID observations table against a plain pandas read.

Run: ``python tests/benchmarks/bench_check.py [rows]``. Generates the table (seeded,
invented taxa and sources) in a temporary folder, then times, in this run:
baseline ``pandas.read_csv`` of observations.csv (all columns as text);
``comparo.curation.harmonise.review`` (what `comparo check` computes: read, validate, curation
diagnostics) in this process; and the CLI ``comparo check --format json`` and the
default text output in a fresh interpreter (imports and printing included).
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


def timed(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def main(rows: int = 100_000) -> None:
    from comparo.curation.harmonise import review

    with tempfile.TemporaryDirectory() as tmp:
        folder = write_table(Path(tmp) / "big", rows)
        review(write_table(Path(tmp) / "warm", 50))  # imports outside the timing
        base = timed(
            lambda: pd.read_csv(folder / "observations.csv", dtype=str, keep_default_na=False)
        )
        res = None

        def run():
            nonlocal res
            res = review(folder)

        api = timed(run)
        cli_json = timed(
            lambda: subprocess.run(
                [sys.executable, "-m", "comparo", "check", str(folder), "--format", "json"],
                capture_output=True,
                check=False,
            )
        )
        cli_text = timed(
            lambda: subprocess.run(
                [sys.executable, "-m", "comparo", "check", str(folder)],
                capture_output=True,
                check=False,
            )
        )
    print(f"check, {rows} valid rows: {res.summary()}")
    print(f"  baseline pandas.read_csv (text): {base:.2f} s")
    print(f"  comparo.curation.harmonise.review (API):     {api:.2f} s   ratio {api / base:.1f}x")
    print(
        f"  comparo check --format json:     {cli_json:.2f} s   ratio {cli_json / base:.1f}x "
        "(fresh interpreter)"
    )
    print(
        f"  comparo check (text table):      {cli_text:.2f} s   ratio {cli_text / base:.1f}x "
        "(fresh interpreter)"
    )


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:]))
