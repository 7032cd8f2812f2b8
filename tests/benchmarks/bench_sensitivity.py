"""Full sensitivity run on a large invented compilation, against a naive route in the same run.

Run: ``python tests/benchmarks/bench_sensitivity.py [--taxa 500] [--sources 50] [--mc 1000]``.

The compilation is INVENTED (seeded): ``--taxa`` taxa on frequency = 30 Hz (M/g)^-0.25
with 5% scatter, body mass and frequency rows each from a random one of
``--sources`` sources (a fifth of the taxa measured twice by two sources), 20% of the
frequencies digitized, standard uncertainties on every value.

Timed:

* ``comparo.fitting.source_sensitivity`` with SMA: every source left out, the basis steps, the
  taxon jackknife and ``--mc`` Monte Carlo draws (the target: under 10 s for 500
  taxa, 50 sources, 1000 draws);
* baseline: the naive route to the leave-one-source-out part alone, rebuilding the
  whole per-taxon table (:func:`comparo.curation.harmonise.per_taxon`) for each dropped source
  and refitting; its slopes must equal the fast route's.

Prints both timings, the ratio, and a plain fit's time for scale.
"""

from __future__ import annotations

import argparse
import dataclasses
import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HEADER = (
    "obs_id,taxon,quantity,value,unit,uncertainty,uncertainty_kind,n,source_id,locator,basis,"
    "inputs,proxy_taxon,temperature_c"
)


def write_compilation(folder: Path, n_taxa: int, n_src: int, seed: int = 20240601) -> None:
    rng = np.random.default_rng(seed)
    logm = rng.uniform(-3, 4, n_taxa)
    rows = [HEADER]
    k = 0
    for i, lm in enumerate(logm):
        taxon = f"Fictus sp{i:04d}"
        mass = 10**lm
        f_true = 30 * mass**-0.25
        for src in rng.choice(n_src, size=2 if rng.random() < 0.2 else 1, replace=False):
            k += 1
            m = mass * math.exp(rng.normal(0, 0.02))
            f = f_true * math.exp(rng.normal(0, 0.05))
            basis = "digitized" if rng.random() < 0.2 else "reported"
            rows.append(
                f"m{k},{taxon},body_mass,{m:.6g},g,{0.03 * m:.3g},sd,5,S{src:02d},Table 1,"
                "reported,,,"
            )
            rows.append(
                f"f{k},{taxon},frequency_observed,{f:.6g},Hz,{0.05 * f:.3g},sd,5,S{src:02d},Table "
                f"2,{basis},,,25"
            )
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "observations.csv").write_text("\n".join(rows) + "\n")
    src_rows = ["source_id,citation,year,doi"] + [
        f"S{s:02d},Invented source {s} (2000) for a benchmark,2000," for s in range(n_src)
    ]
    (folder / "sources.csv").write_text("\n".join(src_rows) + "\n")


def naive_loso(ds, x: str, y: str, method: str) -> dict[str, float]:
    """Leave one source out by rebuilding the whole per-taxon table each time."""
    from comparo.curation.harmonise import harmonise, per_taxon
    from comparo.fitting import fit

    h = harmonise(ds)
    rows = h.rows[h.rows["quantity_key"].isin([x, y])]
    out = {}
    for sid in sorted(rows.loc[rows["status"] == "used", "source_id"].astype(str).unique()):
        r = rows.copy()
        r.loc[r["source_id"].astype(str) == sid, "status"] = "excluded"
        table = per_taxon(ds, harmonised=dataclasses.replace(h, rows=r))
        out[sid] = fit(table, x, y, method).slope
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--taxa", type=int, default=500)
    ap.add_argument("--sources", type=int, default=50)
    ap.add_argument("--mc", type=int, default=1000)
    ap.add_argument("--method", default="sma")
    args = ap.parse_args(argv)

    from comparo.curation.harmonise import per_taxon
    from comparo.fitting import fit
    from comparo.fitting.source_sensitivity import sensitivity
    from comparo.validation.dataset import load

    x, y = "body_mass", "frequency_observed"
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "bench"
        write_compilation(folder, args.taxa, args.sources)
        ds = load(folder)
        table = per_taxon(ds)
        fit(table.head(20), x, y, args.method)  # warm-up: imports outside the timings

        t0 = time.perf_counter()
        plain = fit(table, x, y, args.method)
        t_plain = time.perf_counter() - t0

        t0 = time.perf_counter()
        s = sensitivity(ds, x, y, args.method, mc=args.mc)
        t_full = time.perf_counter() - t0

        t0 = time.perf_counter()
        naive = naive_loso(ds, x, y, args.method)
        t_naive = time.perf_counter() - t0

    fast = {r["source_id"]: r["slope"] for r in s.leave_one_source_out}
    assert math.isclose(
        plain.slope, s.slope, rel_tol=1e-12
    )  # the sensitivity run starts from the plain fit
    same = fast.keys() == naive.keys() and all(
        math.isclose(fast[k], naive[k], rel_tol=1e-12) for k in fast
    )
    n_refits = len(s.leave_one_source_out) + len(s.by_basis)
    print(
        f"sensitivity ({args.method.upper()}), {s.jackknife_se['n']} taxa, {len(fast)} sources, "
        f"{s.measurement_error['draws']} Monte Carlo draws, {len(s.by_basis)} basis steps"
    )
    print(
        f"  full sensitivity run:                 {t_full:.2f} s  (target < 10 s for 500 taxa, 50 "
        "sources, 1000 draws)"
    )
    print(
        f"  naive leave-one-source-out only:      {t_naive:.2f} s  (whole per-taxon table rebuilt "
        "per source)"
    )
    print(
        f"  plain fit: {t_plain * 1e3:.1f} ms; x {n_refits} source/basis refits = "
        f"{t_plain * n_refits:.2f} s"
    )
    print(f"  same leave-one-source-out slopes from both routes: {same}")
    print(f"  ratio naive leave-one-source-out / full run: {t_naive / t_full:.2f}x")
    print(f"  verdict: {s.verdict}")
    return 0 if same else 1


if __name__ == "__main__":
    sys.exit(main())
