"""Random trees for tests, benchmarks and the demo (seeded)."""

from __future__ import annotations

import numpy as np

from comparo.base.errors import UsageError


def random_newick(
    n_tips: int, seed: int | None = None, *, ultrametric: bool = False, polytomy: float = 0.0
) -> str:
    """A random rooted tree with branch lengths, as Newick text (for simulation
    checks and benchmarks).

    Lineages are joined at random, two at a time, until one remains. With
    ``ultrametric`` each join happens after an exponential waiting time of mean
    2/(m - 1) for m lineages (pure-birth-like spacing) and all tips end at height 0;
    otherwise every edge length is 0.001 plus an exponential of mean 1, so tips sit at
    different depths. With probability ``polytomy`` a join takes three lineages
    instead of two (a multifurcation). Tips are ``t1 .. tn``. Seeded with
    ``numpy.random.default_rng(seed)``.
    """
    rng = np.random.default_rng(seed)
    if n_tips < 2:
        raise UsageError("a tree needs at least 2 tips")
    clusters: list[str] = [f"t{i + 1}" for i in range(n_tips)]
    heights = [0.0] * n_tips
    now = 0.0
    while len(clusters) > 1:
        k = 3 if (len(clusters) >= 3 and rng.random() < polytomy) else 2
        m = len(clusters)
        pick = rng.choice(m, size=k, replace=False)
        now += float(rng.exponential(2.0 / (m - 1))) if ultrametric else 0.0
        parts = []
        new_height = now if ultrametric else max(heights[i] for i in pick) + 1.0
        for i in pick:
            length = (
                (new_height - heights[i]) if ultrametric else float(rng.exponential(1.0)) + 1e-3
            )
            parts.append(f"{clusters[i]}:{length:.10g}")
        new = "(" + ",".join(parts) + ")"
        for i in sorted(pick.tolist(), reverse=True):
            clusters[i] = clusters[-1]
            heights[i] = heights[-1]
            clusters.pop()
            heights.pop()
        clusters.append(new)
        heights.append(new_height)
    return clusters[0] + ";"
