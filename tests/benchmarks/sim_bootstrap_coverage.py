"""Coverage of comparo's 95% slope intervals for SMA at small n (simulation, not collected by
pytest).

Bivariate normal data with a known SMA slope (sd_y/sd_x = 0.75, correlation 0.8),
n = 30, REPS data sets (seed 20261202); for each, the exact (Warton et al. 2006)
interval and the percentile and BCa bootstrap intervals from 1,000 resamples.
Prints the share of intervals that cover the true slope, with its binomial SE.

Run: python tests/benchmarks/sim_bootstrap_coverage.py [REPS]
"""

from __future__ import annotations

import math
import sys

import numpy as np

from comparo.fitting import bootstrap_line, model2_line


def main(reps: int = 1000, n: int = 30, n_boot: int = 1000) -> None:
    rng = np.random.default_rng(20261202)
    slope, r = 0.75, 0.8
    cov = np.array([[1.0, r * slope], [r * slope, slope**2]])
    hits = {"exact": 0, "percentile": 0, "bca": 0}
    for k in range(reps):
        xy = rng.multivariate_normal([0, 0], cov, size=n)
        X, Y = xy[:, 0], xy[:, 1]
        lo, hi = model2_line(X, Y, "sma").slope_ci
        hits["exact"] += lo <= slope <= hi
        b = bootstrap_line("sma", X, Y, n_boot, seed=k)["slope"]
        for kind in ("percentile", "bca"):
            lo, hi = b[kind]
            hits[kind] += lo <= slope <= hi
    for kind, h in hits.items():
        p = h / reps
        print(
            f"{kind:10s} coverage {p:.3f} (binomial se {math.sqrt(p * (1 - p) / reps):.3f}), n = "
            f"{n}, {reps} sets"
        )


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 1000)
