"""Benchmark: ``comparo impute`` (lambda by ML) against ``comparo table`` on the same dataset.

A seeded dataset folder of n taxa: a random ultrametric tree (``random_newick``), body mass
simulated by Brownian motion on log10 (invented values), one observation row for 70% of the
taxa; the other 30% are tips without a value, to impute. Each command runs as a whole process
(``python -m comparo ...``, output to a file) three times, alternating; printed: the median
wall time and the CPU time of each, and their ratio (both measured in the same run, so a
loaded machine slows both); also ``comparo table --impute body_mass`` (the imputed values
added to the per-taxon table, with their lineage). The issue asks for impute <= 3x table
at 20,000 tips and < 10 s at 100,000 tips.

Run: ``python tests/benchmarks/bench_impute.py [n ...]`` (default 20000 100000).
"""

from __future__ import annotations

import csv
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from comparo.phylo import random_newick
from comparo.phylo.flat import flat
from comparo.phylo.trees import as_topo


def write_dataset(folder: Path, n: int, seed: int = 28) -> None:
    nw = random_newick(n, seed, ultrametric=True)
    ft = flat(as_topo(nw), None)
    rng = np.random.default_rng(seed)
    x = np.zeros(ft.n_nodes)  # BM from the root down, level by level
    for k in range(len(ft.bounds) - 3, -1, -1):
        a, b = int(ft.bounds[k]), int(ft.bounds[k + 1])
        x[a:b] = x[ft.parent[a:b]] + np.sqrt(ft.length[a:b]) * rng.normal(size=b - a)
    log_mass = -4.0 + 0.12 * x[: ft.n_tips]  # log10 kg: around 0.1 g
    observed = rng.random(ft.n_tips) < 0.7
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "tree.nwk").write_text(nw + "\n", encoding="utf-8")
    sources = "source_id,citation,year,doi\nS1,Invented (2026) benchmark source,2026,\n"
    (folder / "sources.csv").write_text(sources, encoding="utf-8")
    with open(folder / "observations.csv", "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(
            ["obs_id", "taxon", "quantity", "value", "unit", "source_id", "locator", "basis"]
        )
        for i in np.flatnonzero(observed):
            mg = f"{10 ** (log_mass[i] + 6):.6g}"
            w.writerow([f"B{i}", ft.tips[i], "body_mass", mg, "mg", "S1", "Table 1", "reported"])


def run(argv: list[str]) -> tuple[float, float]:
    """Wall and CPU seconds of one fresh process."""
    r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    subprocess.run(argv, check=True, capture_output=True)
    wall = time.perf_counter() - t0
    r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (r1.ru_utime - r0.ru_utime) + (r1.ru_stime - r0.ru_stime)


def one(n: int) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        ds = Path(tmp) / "ds"
        write_dataset(ds, n)
        py = [sys.executable, "-m", "comparo"]
        table = py + ["table", str(ds), "-o", str(Path(tmp) / "table.csv")]
        impute = py + [
            "impute",
            str(ds),
            "--y",
            "body_mass",
            "--format",
            "json",
            "-o",
            str(Path(tmp) / "imp.json"),
        ]
        table_imp = py + [
            "table",
            str(ds),
            "--impute",
            "body_mass",
            "-o",
            str(Path(tmp) / "table_imp.csv"),
        ]
        subprocess.run(py + ["--help"], capture_output=True)
        t, i, ti = [], [], []
        load0 = os.getloadavg()[0]
        for _ in range(3):
            t.append(run(table))
            i.append(run(impute))
            ti.append(run(table_imp))
        load1 = os.getloadavg()[0]
        tw, tc = statistics.median(w for w, _ in t), statistics.median(c for _, c in t)
        iw, ic = statistics.median(w for w, _ in i), statistics.median(c for _, c in i)
        jw, jc = statistics.median(w for w, _ in ti), statistics.median(c for _, c in ti)
        import json

        d = json.loads((Path(tmp) / "imp.json").read_text(encoding="utf-8"))
        cv = d["cross_validation"]
        print(
            f"n {n:>6}: table {tw:6.2f} s wall {tc:6.2f} s CPU | impute {iw:6.2f} s wall"
            f" {ic:6.2f} s CPU | ratio wall {iw / tw:4.2f}, CPU {ic / tc:4.2f} |"
            f" lambda {d['lambda']:.4f}, {d['n_observed']} observed, {d['n_imputed']} imputed,"
            f" LOO RMSE {cv['rmse_log']:.3f}, coverage {cv['coverage']:.3f}"
            f" | load {load0:.1f}-{load1:.1f}"
        )
        print(
            f"          table --impute body_mass {jw:6.2f} s wall {jc:6.2f} s CPU"
            f" (ratio to table: wall {jw / tw:4.2f}, CPU {jc / tc:4.2f})"
        )


if __name__ == "__main__":
    for arg in sys.argv[1:] or ["20000", "100000"]:
        one(int(arg))
