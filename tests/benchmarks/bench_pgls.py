"""Benchmark: linear-time PGLS (comparo.phylo) vs dense statsmodels GLS.

For random trees (seeded) of n tips, the same data are fitted with
``comparo.phylo.pgls`` (lambda fixed at 1, including tip matching and
pruning; and by ML), with one pass of ``gls_quantities`` on the prepared tree, and with statsmodels
GLS on the dense Brownian covariance C (built outside the timing, from the tree's
ancestor sets). Printed: seconds per fit, the ratio dense / linear, and the
largest relative difference of slope, intercept, their SEs and log-likelihood.
Then a lambda-ML fit on a 100,000-tip tree (reading the Newick timed apart), and the
whole process of ``comparo fit TABLE.csv --method pgls --tree TREE.nwk --log none
--format json`` on the same tree and data in a fresh interpreter (from the Newick text
on disk to the fitted result on stdout), beside ``python -c "import pandas"`` run just
before it.

Run: ``python tests/benchmarks/bench_pgls.py [n ...]`` (the 100,000-tip runs alone:
``... bench_pgls.py big``; the whole-process run alone: ``... bench_pgls.py whole``).
"""

from __future__ import annotations

import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import scipy.sparse as sp
import statsmodels.api as sm

from comparo import phylo


def dense_covariance(ft: phylo.FlatTree) -> np.ndarray:
    """C = A' diag(t) A, A[node, tip] = 1 if the tip descends from (or is) the node."""
    rows, cols = [], []
    par = ft.parent.tolist()
    for tip in range(ft.n_tips):
        node = tip
        while node >= 0:
            rows.append(node)
            cols.append(tip)
            node = par[node]
    A = sp.csr_matrix((np.ones(len(rows)), (rows, cols)), shape=(ft.n_nodes, ft.n_tips))
    return (A.T @ sp.diags(ft.length) @ A).toarray()


def timed(fn, repeat=1):
    best = float("inf")
    out = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def one(n: int, seed: int = 1) -> None:
    nw = phylo.random_newick(n, seed, ultrametric=False, polytomy=0.1)
    tree = phylo.read_tree(nw)
    ft = phylo.flat_tree(tree)
    C = dense_covariance(ft)
    rng = np.random.default_rng(seed + 1)
    L = np.linalg.cholesky(C)
    x = L @ rng.normal(size=n)
    y = 0.2 + 0.7 * x + L @ rng.normal(size=n)
    df = pd.DataFrame({"taxon": list(ft.tips), "x": x, "y": y})
    X = sm.add_constant(x)
    t_dense, ref = timed(lambda: sm.GLS(y, X, sigma=C).fit(), repeat=1)
    t_lin, r = timed(lambda: phylo.pgls(df, "x", "y", tree=tree, log="none", lambda_=1.0), repeat=3)
    Z = np.column_stack([X, y])
    t_eng, gq = timed(lambda: phylo.gls_quantities(ft, Z), repeat=3)
    t_ml, rml = timed(
        lambda: phylo.pgls(df, "x", "y", tree=tree, log="none", lambda_="ml"), repeat=1
    )
    ours = np.array([r["intercept"], r["slope"], r["intercept_se"], r["slope_se"], r["loglik"]])
    theirs = np.array([*ref.params, *ref.bse, ref.llf])
    diff = np.max(np.abs(ours - theirs) / np.abs(theirs))
    beta = np.linalg.solve(gq.W[:2, :2], gq.W[:2, 2])
    diff = max(diff, np.max(np.abs(beta - ref.params) / np.abs(ref.params)))
    print(
        f"n {n:>6}: dense GLS {t_dense:7.3f} s | phylo_fit {t_lin:7.4f} s (ratio "
        f"{t_dense / t_lin:6.1f} x)"
        f" | engine pass on the prepared tree {t_eng:7.4f} s (ratio {t_dense / t_eng:7.1f} x)"
        f" | max rel diff {diff:.1e} | lambda-ML phylo_fit {t_ml:6.3f} s (lambda "
        f"{rml['lambda']:.3f})"
    )


def big(n: int = 100_000, seed: int = 7) -> None:
    nw = phylo.random_newick(n, seed, ultrametric=True)
    t_read, tree = timed(lambda: phylo.read_tree(nw))
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    y = 0.5 * x + rng.normal(size=n)
    df = pd.DataFrame({"taxon": [f"t{i + 1}" for i in range(n)], "x": x, "y": y})
    t_fit, r = timed(lambda: phylo.pgls(df, "x", "y", tree=tree, log="none", lambda_="ml"))
    print(
        f"n {n}: read Newick {t_read:.2f} s; lambda-ML PGLS (match, prune, search, CI, LR tests) "
        f"{t_fit:.2f} s; lambda {r['lambda']:.4f} CI {r['lambda_ci']}"
    )


def whole(n: int = 100_000, seed: int = 7) -> None:
    """Fresh-process CLI run: read the Newick file and the CSV, match, lambda-ML fit, JSON."""
    nw = phylo.random_newick(n, seed, ultrametric=True)
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    y = 0.5 * x + rng.normal(size=n)
    with tempfile.TemporaryDirectory() as tmp:
        tree, table = Path(tmp) / "tree.nwk", Path(tmp) / "table.csv"
        tree.write_text(nw, encoding="utf-8")
        pd.DataFrame({"taxon": [f"t{i + 1}" for i in range(n)], "x": x, "y": y}).to_csv(
            table, index=False
        )
        argv = [
            sys.executable,
            "-m",
            "comparo",
            "fit",
            str(table),
            "--x",
            "x",
            "--y",
            "y",
            "--method",
            "pgls",
            "--tree",
            str(tree),
            "--log",
            "none",
            "--format",
            "json",
        ]
        env = {
            k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"
        }  # byte-code cached, as installed
        subprocess.run([sys.executable, "-m", "comparo", "--help"], capture_output=True, env=env)
        base, cli, cpu = [], [], []
        load0 = os.getloadavg()
        for _ in range(3):
            t0 = time.perf_counter()
            subprocess.run([sys.executable, "-c", "import pandas"], check=True, env=env)
            base.append(time.perf_counter() - t0)
            r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
            t0 = time.perf_counter()
            out = subprocess.run(argv, capture_output=True, text=True, env=env)
            cli.append(time.perf_counter() - t0)
            r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
            cpu.append(r1.ru_utime - r0.ru_utime + r1.ru_stime - r0.ru_stime)
            if out.returncode:
                raise SystemExit(out.stderr[-2000:])
    load = os.getloadavg()
    print(
        f"n {n}: whole process 'comparo fit ... --method pgls --tree' median of 3 "
        f"{np.median(cli):.2f} s wall, "
        f"{np.median(cpu):.2f} s CPU (user + system) (wall runs "
        f"{', '.join(f'{t:.2f}' for t in cli)}; target < 6 s); "
        f"python -c 'import pandas' {np.median(base):.2f} s; load average before {load0[0]:.2f}, "
        f"after {load[0]:.2f}"
    )


if __name__ == "__main__":
    if sys.argv[1:] == ["whole"]:
        whole()
        raise SystemExit(0)
    if sys.argv[1:] == ["big"]:
        big()
        whole()
        raise SystemExit(0)
    sizes = [int(a) for a in sys.argv[1:]] or [500, 2000, 4000]
    for n in sizes:
        one(n)
    big()
    whole()
