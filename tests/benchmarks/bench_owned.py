"""Benchmark: what comparo wrote itself against the library that does the same job.

Each pair runs in the same process, on the same data, one after the other, and the ratio
library / own is printed (above 1: ours is faster). Import costs are measured in fresh
interpreters (``python -c``), each against a baseline interpreter that imports what the
command has already imported by then (numpy, or pandas), best of five.

* BCa bootstrap interval of an OLS slope (Efron 1987): ``comparo.fitting.bootstrap_line``
  (resampled lines from moments, jackknife from running sums) vs ``scipy.stats.bootstrap``
  (``method="BCa"``, paired, vectorised statistic), 2,000 resamples.
* Brent's bounded minimisation (Brent 1973): ``comparo.phylo.search.minimize_bounded`` vs
  ``scipy.optimize.minimize_scalar(method="bounded")``: the import of scipy.optimize, and
  the time of one search on a smooth function of lambda.
* Phylogenetically independent contrasts (Felsenstein 1985): ``comparo.phylo.contrasts`` vs
  dendropy's ``PhylogeneticIndependentContrasts``, binary random tree.
* The lazy schema validation: ``comparo.validation.tables.schema_failures`` vs pandera's
  ``validate(lazy=True)`` of the same rules (``pandera_schema``), and pandera's import.
* Huber M-estimate slopes of Monte Carlo draws: ``comparo.fitting.robust.huber_slopes``
  (all draws in one IRLS) vs a loop of statsmodels ``RLM`` (HuberT), 200 draws of 60 points.

Run: ``python tests/benchmarks/bench_owned.py``. The numbers quoted in docs/architecture.md
("What we wrote ourselves, and why") come from this script.
"""

from __future__ import annotations

import subprocess
import sys
import time

import numpy as np


def best(fun, repeat: int = 5, number: int = 1) -> float:
    """Best of *repeat* runs of *number* calls, seconds per call."""
    out = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        for _ in range(number):
            fun()
        out.append((time.perf_counter() - t0) / number)
    return min(out)


def import_cost(module: str, baseline: str, repeat: int = 5) -> float:
    """Seconds that ``import module`` adds to a fresh interpreter that imported *baseline*."""

    def run(code: str) -> float:
        times = []
        for _ in range(repeat):
            t0 = time.perf_counter()
            subprocess.run([sys.executable, "-c", code], check=True)
            times.append(time.perf_counter() - t0)
        return min(times)

    return run(f"import {baseline}; import {module}") - run(f"import {baseline}")


def row(what: str, own: float, lib: float, unit: str = "ms") -> None:
    scale = 1e3 if unit == "ms" else 1.0
    print(
        f"{what:<46} own {own * scale:9.3f} {unit}  library {lib * scale:9.3f} {unit}  "
        f"ratio {lib / own:7.1f}"
    )


def bca() -> None:
    from scipy import stats

    from comparo.fitting import bootstrap_line

    rng = np.random.default_rng(1)
    X = rng.normal(size=60)
    Y = 0.75 * X + rng.normal(scale=0.3, size=60)

    def slope(x, y, axis=-1):
        xc = x - x.mean(axis=axis, keepdims=True)
        yc = y - y.mean(axis=axis, keepdims=True)
        return (xc * yc).sum(axis=axis) / (xc * xc).sum(axis=axis)

    def ours():
        return bootstrap_line("ols", X, Y, 2000, ci=0.95, seed=3)["slope"]["bca"]

    def theirs():
        r = stats.bootstrap(
            (X, Y),
            slope,
            paired=True,
            vectorized=True,
            n_resamples=2000,
            method="BCa",
            random_state=3,
        )
        return r.confidence_interval

    a, b = ours(), theirs()
    row("BCa interval, OLS slope, n 60, 2000 resamples", best(ours), best(theirs))
    print(f"    intervals: own [{a[0]:.4f}, {a[1]:.4f}]  scipy [{b.low:.4f}, {b.high:.4f}]")


def brent() -> None:
    from scipy import optimize

    from comparo.phylo.search import minimize_bounded

    def f(lam):
        return (lam - 0.6180339887) ** 2 * (1.0 + lam) + 0.1 * np.sin(3.0 * lam)

    row(
        "Brent bounded minimum, one search",
        best(lambda: minimize_bounded(f, 0.0, 1.0, 1e-6), number=50),
        best(
            lambda: optimize.minimize_scalar(
                f, bounds=(0.0, 1.0), method="bounded", options={"xatol": 1e-6}
            ),
            number=50,
        ),
    )
    cost = import_cost("scipy.optimize", "numpy, comparo.phylo.likelihood")
    own = import_cost("comparo.phylo.search", "numpy, comparo.phylo.likelihood")
    row("import (after numpy and comparo.phylo)", max(own, 1e-4), cost)


def contrasts() -> None:
    import dendropy
    from dendropy.model import continuous

    from comparo import phylo

    nw = phylo.random_newick(400, 11, ultrametric=True)
    rng = np.random.default_rng(12)
    tree = dendropy.Tree.get(data=nw, schema="newick", preserve_underscores=True)
    labels = [t.label for t in tree.taxon_namespace]
    values = dict(zip(labels, rng.normal(size=len(labels)).tolist(), strict=True))

    def ours():
        return phylo.contrasts(nw, values).contrasts

    def theirs():
        t = dendropy.Tree.get(data=nw, schema="newick", preserve_underscores=True)
        chars = dendropy.ContinuousCharacterMatrix.from_dict(
            {k: [v] for k, v in values.items()}, taxon_namespace=t.taxon_namespace
        )
        pic = continuous.PhylogeneticIndependentContrasts(tree=t, char_matrix=chars)
        ct = pic.contrasts_tree(character_index=0)
        return np.array([nd.pic_contrast_standardized for nd in ct.internal_nodes()])

    a, b = ours(), theirs()
    same = np.allclose(np.sort(np.abs(a)), np.sort(np.abs(b)), rtol=1e-9, atol=1e-12)
    row("independent contrasts, 400 tips (with reading)", best(ours), best(theirs))
    print(f"    same |contrasts| (sorted): {same}")


def schema() -> None:
    import pandas as pd

    from comparo.validation.tables import column_rules, pandera_schema, schema_failures

    rng = np.random.default_rng(5)
    n = 100_000
    frame = pd.DataFrame(
        {
            "obs_id": [f"OBS{i:06d}" for i in range(n)],
            "source_id": rng.choice(["S1", "S2", "S3"], n),
            "taxon": rng.choice(["Alpha beta", "Gamma delta"], n),
            "quantity": rng.choice(["body_mass", "cycle_frequency"], n),
            "value": rng.choice(["1.5", "2", "abc", "", "-3"], n),
            "unit": rng.choice(["g", "Hz"], n),
        }
    ).astype(str)
    rules = column_rules("observations")
    schema_ = pandera_schema("observations")

    def theirs():
        import pandera.errors as pe

        try:
            schema_.validate(frame, lazy=True)
        except pe.SchemaErrors as exc:
            return len(exc.failure_cases)
        return 0

    n_ours, n_theirs = len(schema_failures(rules, frame)), theirs()
    row(
        "lazy schema validation, 100,000 rows",
        best(lambda: schema_failures(rules, frame), 3),
        best(theirs, 3),
    )
    print(f"    failure cases: own {n_ours}, pandera {n_theirs}")
    row(
        "import (after pandas)",
        max(import_cost("comparo.validation.tables", "pandas"), 1e-4),
        import_cost("pandera.pandas", "pandas"),
    )


def huber() -> None:
    import statsmodels.api as sm

    from comparo.fitting.robust import HUBER_C, huber_slopes

    rng = np.random.default_rng(9)
    X = rng.normal(size=(200, 60))
    Y = 0.8 * X + rng.standard_t(3, size=(200, 60)) * 0.2

    def theirs():
        norm = sm.robust.norms.HuberT(t=HUBER_C)
        return np.array(
            [
                sm.RLM(y, sm.add_constant(x), M=norm).fit().params[1]
                for x, y in zip(X, Y, strict=True)
            ]
        )

    diff = float(np.max(np.abs(huber_slopes(X, Y) - theirs())))
    row(
        "Huber slopes, 200 draws of 60 points", best(lambda: huber_slopes(X, Y), 3), best(theirs, 3)
    )
    print(f"    largest slope difference: {diff:.2e}")


if __name__ == "__main__":
    print(f"python {sys.version.split()[0]}; times are the best of several runs")
    for part in (bca, brent, contrasts, schema, huber):
        part()
