"""Speed of comparo.derivation.derive with Monte Carlo: 10,000 draws over 1,000 taxa.

Prints the wall time of ``derive(table, mc=10_000)`` and its ratio to a baseline
measured in the same run: the bare numpy cost of drawing and summarising the same
number of lognormal values (one input, 5 quantiles), i.e. the least any Monte
Carlo of this size can cost. Run: ``python tests/benchmarks/bench_derive.py``.
"""

from __future__ import annotations

import time

import numpy as np
import pandas as pd

from comparo.derivation import derive

N_TAXA, DRAWS = 1_000, 10_000


def table(n: int, seed: int = 1) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    cols: dict[str, object] = {
        "taxon": [f"T{i}" for i in range(n)],
        "temperature_c": rng.uniform(10, 40, n),
    }
    spec = {
        "fiber_radius": 20.0,
        "lattice_spacing_d10": 40.0,
        "elastic_modulus": 100.0,
        "attach_rate": 50.0,
        "detach_rate": 20.0,
        "frequency_observed": 10.0,
    }
    for q, centre in spec.items():
        v = centre * np.exp(rng.normal(0, 0.15, n))
        cols[q], cols[f"{q}_u"] = v, 0.1 * v
        cols[f"{q}_basis"], cols[f"{q}_obs"] = ["reported"] * n, [f"{q}-{i}" for i in range(n)]
    return pd.DataFrame(cols)


def baseline(n: int, draws: int) -> float:
    t0 = time.perf_counter()
    rng = np.random.default_rng(0)
    x = np.exp(0.1 * rng.standard_normal((n, draws)))
    np.quantile(x, (0.025, 0.16, 0.5, 0.84, 0.975), axis=1)
    return time.perf_counter() - t0


def main() -> None:
    tab = table(N_TAXA)
    derive(tab.head(5), mc=100)  # warm-up: imports, schema, unit registry
    base = baseline(N_TAXA, DRAWS)
    t0 = time.perf_counter()
    out = derive(tab, mc=DRAWS)
    took = time.perf_counter() - t0
    assert out["poroelastic_time_mc_median"].notna().all()
    print(f"derive, {N_TAXA} taxa x {DRAWS} draws: {took:.2f} s")
    print(f"baseline (one lognormal input drawn and summarised): {base:.2f} s")
    print(f"ratio derive / baseline: {took / base:.1f}")


if __name__ == "__main__":
    main()
