"""Whole-process latency of everyday commands against ``python -c "import pandas"``.

Run: ``python tests/benchmarks/bench_latency.py [rounds]`` (default 11 rounds).

The demo compilation is written once with ``comparo demo -o DIR`` (not timed).
Each round then runs, in fresh interpreters of the same Python, the baseline
``python -c "import pandas"`` immediately before each command, so every command
time has a baseline measured seconds apart under the same machine load (other
jobs on the same cores move both). Printed per command: the median wall time,
the median of the paired ratios command / baseline, the ratio of median CPU times (user +
system of the child process, less moved by other jobs than wall time), and the load average.

Commands timed (the dataset is the demo's ``synthetic_cyclers`` folder):

- ``comparo fit DS --x body_mass --y frequency_observed --method sma --format json``
- ``comparo check DS``
- ``comparo table DS -o t.csv``
- ``comparo derive DS -o d.csv``
- ``comparo audit DS``
- ``comparo --help`` (absolute time; target < 0.5 s)
"""

from __future__ import annotations

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
BASELINE = [PY, "-c", "import pandas"]
# As an installed package runs: byte-code is written on the warm-up run and read after
# (PYTHONDONTWRITEBYTECODE, when set, would make every run recompile comparo's sources).
ENV = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}


def comparo(*argv: str) -> list[str]:
    return [PY, "-m", "comparo", *argv]


CPU: dict[str, list[float]] = {}


def wall(argv: list[str], ok_codes=(0,), cwd: str | None = None, name: str | None = None) -> float:
    """Wall time of one fresh process; its CPU time (user + system) goes to CPU[name]."""
    r0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    proc = subprocess.run(argv, capture_output=True, cwd=cwd, env=ENV)
    dt = time.perf_counter() - t0
    r1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    if name:
        CPU.setdefault(name, []).append(r1.ru_utime - r0.ru_utime + r1.ru_stime - r0.ru_stime)
    if proc.returncode not in ok_codes:
        raise SystemExit(
            f"{' '.join(argv)} exited {proc.returncode}:\n{proc.stderr.decode()[-2000:]}"
        )
    return dt


def comparo_origin() -> str:
    out = subprocess.run(
        [PY, "-c", "import comparo; print(comparo.__file__)"],
        capture_output=True,
        text=True,
        env=ENV,
    )
    return str(Path(out.stdout.strip()).parent)


def main(rounds: int = 11) -> None:
    work = Path(tempfile.mkdtemp(prefix="comparo-latency-"))
    try:
        subprocess.run(
            comparo("demo", "-o", str(work / "demo"), "--quiet"),
            check=True,
            capture_output=True,
            env=ENV,
        )
        ds = str(work / "demo" / "synthetic_cyclers")
        commands = {
            "fit sma json": comparo(
                "fit",
                ds,
                "--x",
                "body_mass",
                "--y",
                "frequency_observed",
                "--method",
                "sma",
                "--format",
                "json",
            ),
            "check": comparo("check", ds),
            "table -o t.csv": comparo("table", ds, "-o", str(work / "t.csv")),
            "derive -o d.csv": comparo("derive", ds, "-o", str(work / "d.csv")),
            "audit": comparo("audit", ds),
            "--help": comparo("--help"),
        }
        for argv in [BASELINE, *commands.values()]:  # warm the file cache and byte-code
            wall(argv)
        times: dict[str, list[float]] = {name: [] for name in commands}
        ratios: dict[str, list[float]] = {name: [] for name in commands}
        base_all: list[float] = []
        load0 = os.getloadavg()
        for _ in range(rounds):
            for name, argv in commands.items():
                b = wall(BASELINE, name="baseline")
                t = wall(argv, name=name)
                base_all.append(b)
                times[name].append(t)
                ratios[name].append(t / b)
        load1 = os.getloadavg()
    finally:
        shutil.rmtree(work, ignore_errors=True)
    print(
        f"whole-process wall time, {rounds} rounds, each command paired with a baseline run just "
        f"before it (byte-code cached, as installed; python {sys.version.split()[0]}; comparo from "
        f"{comparo_origin()})"
    )
    print(
        f"load average (1, 5, 15 min) before {load0[0]:.2f} {load0[1]:.2f} {load0[2]:.2f}, "
        f"after {load1[0]:.2f} {load1[1]:.2f} {load1[2]:.2f}; {os.cpu_count()} cpus"
    )
    print(
        f"  baseline python -c 'import pandas': median {statistics.median(base_all):.3f} s "
        f"(CPU {statistics.median(CPU['baseline']):.3f} s)"
    )
    for name in commands:
        med = statistics.median(times[name])
        r = statistics.median(ratios[name])
        target = "target < 0.5 s" if name == "--help" else "target <= 2.0x"
        cpu = statistics.median(CPU[name]) / statistics.median(CPU["baseline"])
        print(
            f"  comparo {name:<15} median {med:.3f} s   ratio {r:.2f}x  "
            f"(paired ratios {min(ratios[name]):.2f}-{max(ratios[name]):.2f}; {target}; CPU-time "
            f"ratio {cpu:.2f}x)"
        )


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:]))
