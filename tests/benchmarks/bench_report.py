"""Whole-process time of the demo report against ``python -c "import pandas"``, and against
an earlier commit of comparo in the same run.

Run: ``python tests/benchmarks/bench_report.py [rounds] [REV]`` (default 3 rounds; REV, e.g.
``59d530b`` or ``HEAD~3``, is the "before" code, taken with ``git archive`` into a temporary
folder and run with ``PYTHONPATH`` pointing at it; without REV only this tree is timed).

The demo compilation is written once with ``comparo demo -o DIR`` (not timed). Each round
runs, in fresh interpreters of the same Python, the baseline, then ``comparo report DS -o OUT
--quiet`` of this tree, then (with REV) the same command of REV. Printed per command: median
wall time, median CPU time (user + system of the process and of every child it waited for,
i.e. the figure renderers it forks), the median paired ratio to the baseline, and the load
average before and after: on a machine shared with other jobs, wall times move with the load
and CPU times much less. The last line compares the bytes of the two reports' figures and
tables (they must be equal: the same figures, the same numbers).
"""

from __future__ import annotations

import filecmp
import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

PY = sys.executable
ROOT = Path(__file__).resolve().parents[2]
BASELINE = [PY, "-c", "import pandas"]
ENV = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}


def run(argv: list[str], env: dict[str, str]) -> tuple[float, float]:
    """Wall and CPU time (user + system, waited-for children included) of one process."""
    r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    # from a neutral folder: ``python -m`` puts the working folder first on sys.path
    proc = subprocess.run(argv, capture_output=True, env=env, cwd=tempfile.gettempdir())
    dt = time.perf_counter() - t0
    r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    if proc.returncode != 0:
        raise SystemExit(f"{' '.join(argv)} exited {proc.returncode}:\n{proc.stderr.decode()}")
    return dt, r1.ru_utime - r0.ru_utime + r1.ru_stime - r0.ru_stime


def origin(env: dict[str, str]) -> str:
    """The folder comparo is imported from with *env*, from the same neutral folder."""
    argv = [PY, "-c", "import comparo; print(comparo.__file__)"]
    out = subprocess.run(argv, capture_output=True, text=True, env=env, cwd=tempfile.gettempdir())
    return str(Path(out.stdout.strip()).parent)


def checkout(rev: str, where: Path) -> Path:
    """The package of *rev* laid out as installed (schema and demo tables inside comparo/)."""
    archive = subprocess.run(["git", "-C", str(ROOT), "archive", rev], capture_output=True)
    if archive.returncode != 0:
        raise SystemExit(archive.stderr.decode())
    subprocess.run(["tar", "-x", "-C", str(where)], input=archive.stdout, check=True)
    for sub in ("schema", "demo_tables"):
        if (where / sub).is_dir() and not (where / "comparo" / sub).exists():
            shutil.copytree(where / sub, where / "comparo" / sub)
    return where


def same_outputs(a: Path, b: Path) -> str:
    """Which figure and table files differ between two report folders (run.json has a date)."""
    differ = []
    for sub in ("figures", "tables"):
        names = sorted(p.name for p in (a / sub).iterdir())
        if names != sorted(p.name for p in (b / sub).iterdir()):
            differ.append(f"{sub}: different file names")
            continue
        _, bad, err = filecmp.cmpfiles(a / sub, b / sub, names, shallow=False)
        differ += [f"{sub}/{n}" for n in bad + err]
    return "identical figures and tables" if not differ else "DIFFER: " + ", ".join(differ)


def main(rounds: int = 3, rev: str | None = None) -> None:
    work = Path(tempfile.mkdtemp(prefix="comparo-report-bench-"))
    try:
        subprocess.run(
            [PY, "-m", "comparo", "demo", "-o", str(work / "demo"), "--quiet"],
            check=True,
            capture_output=True,
            env=ENV,
            cwd=work,
        )
        ds = str(work / "demo" / "synthetic_cyclers")
        cmds = {"this tree": ([PY, "-m", "comparo", "report", ds, "-o"], ENV)}
        if rev:
            (work / "before").mkdir()
            env = {**ENV, "PYTHONPATH": str(checkout(rev, work / "before"))}
            cmds[rev] = ([PY, "-m", "comparo", "report", ds, "-o"], env)
        runs: dict[str, list[tuple[float, float]]] = {"baseline": []}
        ratios: dict[str, list[float]] = {}
        run(BASELINE, ENV)  # warm the file cache and byte-code
        for name, (argv, env) in cmds.items():
            run([*argv, str(work / f"warm-{len(runs)}"), "--quiet"], env)
            runs[name], ratios[name] = [], []
        load0 = os.getloadavg()
        for i in range(rounds):
            for k, (name, (argv, env)) in enumerate(cmds.items()):
                b = run(BASELINE, ENV)
                t = run([*argv, str(work / f"out-{k}-{i}"), "--quiet"], env)
                runs["baseline"].append(b)
                runs[name].append(t)
                ratios[name].append(t[0] / b[0])
        load1 = os.getloadavg()
        print(
            f"comparo report on the demo, {rounds} rounds, python {sys.version.split()[0]}, "
            f"{len(os.sched_getaffinity(0))} usable cores; load average (1, 5, 15 min) before "
            f"{load0[0]:.2f} {load0[1]:.2f} {load0[2]:.2f}, after "
            f"{load1[0]:.2f} {load1[1]:.2f} {load1[2]:.2f}"
        )
        for name, rs in runs.items():
            wall = statistics.median(r[0] for r in rs)
            cpu = statistics.median(r[1] for r in rs)
            line = f"  {name:<12} median wall {wall:6.2f} s, CPU {cpu:6.2f} s"
            if name in ratios:
                base_cpu = statistics.median(r[1] for r in runs["baseline"])
                line += (
                    f"; wall / baseline {statistics.median(ratios[name]):.1f}x "
                    f"(CPU {cpu / base_cpu:.1f}x); walls {', '.join(f'{r[0]:.2f}' for r in rs)}"
                )
            print(line)
            if name in cmds:
                print(f"{'':15}comparo from {origin(cmds[name][1])}")
        if rev:
            print(
                f"  outputs of the last round: {same_outputs(work / 'out-0-0', work / 'out-1-0')}"
            )
    finally:
        shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    args = sys.argv[1:]
    main(int(args[0]) if args else 3, args[1] if len(args) > 1 else None)
