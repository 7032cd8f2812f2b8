"""Start-up time of ``comparo --help`` against ``python -c pass``.

Run: ``python tests/benchmarks/bench_startup.py [repeats]``. Median wall time of
repeated fresh subprocesses of each (same interpreter), and their difference and ratio.
"""

from __future__ import annotations

import statistics
import subprocess
import sys
import time


def median_run(argv: list[str], repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        subprocess.run(argv, capture_output=True, check=True)
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main(repeats: int = 15) -> None:
    median_run([sys.executable, "-m", "comparo", "--help"], 2)  # warm the file cache
    base = median_run([sys.executable, "-c", "pass"], repeats)
    cli = median_run([sys.executable, "-m", "comparo", "--help"], repeats)
    print(f"start-up, median of {repeats} runs")
    print(f"  python -c pass:       {base:.3f} s")
    print(
        f"  python -m comparo --help: {cli:.3f} s   (+{cli - base:.3f} s, ratio "
        f"{cli / base:.1f}x; target < 0.5 s)"
    )


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:]))
