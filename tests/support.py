"""Test support: tiny valid datasets written to tmp folders, hashing, a CLI runner.

Imported by tests as ``from support import ...`` (pytest puts tests/ on the path)."""

from __future__ import annotations

import contextlib
import hashlib
import io
import subprocess
import sys
import warnings
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_tables" / "synthetic_cyclers"

OBS_HEADER = (
    "obs_id,taxon,quantity,value,unit,uncertainty,uncertainty_kind,n,source_id,locator,"
    "basis,inputs,proxy_taxon,temperature_c"
)
VALID_ROWS = [
    "o1,Apis mellifera,body_mass,100,mg,,,,s1,Table 1,reported,,,",
    "o2,Apis mellifera,fiber_radius,12,um,1,sd,10,s1,Table 2,reported,,,",
    "o3,Apis mellifera,frequency_observed,230,Hz,10,sd,5,s2,Fig. 2,digitized,,,30",
    "o4,Bombus terrestris,body_mass,0.2,g,,,,s2,Table 1,reported,,,",
    "o5,Bombus terrestris,attach_rate,120,1/s,,,,s2,p. 4,reported,,,25",
    "o6,Bombus terrestris,kinetic_time,5,ms,,,,s2,p. 4,computed,o5,,25",
]
SOURCES = (
    "source_id,citation,year,doi\ns1,Invented A. (2001) Test source one,2001,10.1000/abc\n"
    "s2,Invented B. (2002) Test source two,2002,\n"
)


# the keys of ``comparo fit --format json`` with one x (the contract of docs/cli.md)
FIT_JSON_KEYS = frozenset(
    {
        "method", "x", "y", "log", "n", "slope", "slope_ci", "intercept", "intercept_ci", "r2",
        "ci_level", "against", "lambda", "lambda_ci", "loglik", "groups", "outliers",
        "excluded", "breakpoint", "sensitivity", "terms",
    }
)  # fmt: skip


def demo_taxa() -> int:
    """Accepted taxa of the demo compilation, counted from its taxa.csv (a row whose
    accepted_name is blank is an accepted taxon; a filled one is a synonym)."""
    import csv

    with open(DEMO / "taxa.csv", newline="", encoding="utf-8") as fh:
        return sum(1 for r in csv.DictReader(fh) if not r["accepted_name"])


def write_dataset(
    folder: Path,
    rows: list[str] | None = None,
    header: str = OBS_HEADER,
    sources: str = SOURCES,
    name: str = "observations.csv",
) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / name).write_text(
        header + "\n" + "\n".join(VALID_ROWS if rows is None else rows) + "\n", encoding="utf-8"
    )
    (folder / "sources.csv").write_text(sources, encoding="utf-8")
    return folder


def tree_hash(folder: Path) -> str:
    """SHA-256 over every file's relative path and bytes (inputs-unchanged checks)."""
    h = hashlib.sha256()
    for p in sorted(folder.rglob("*")):
        if p.is_file():
            h.update(str(p.relative_to(folder)).encode())
            h.update(p.read_bytes())
    return h.hexdigest()


def run_cli(*args: str, timeout: float = 60) -> subprocess.CompletedProcess:
    """Run ``python -m comparo ARGS`` in a subprocess (as a user would)."""
    return subprocess.run(
        [sys.executable, "-m", "comparo", *args], capture_output=True, text=True, timeout=timeout
    )


def run_main(*args: str) -> subprocess.CompletedProcess:
    """Run ``comparo ARGS`` in this process through :func:`comparo.cli.main.main` and return what
    :func:`run_cli` returns (exit code, standard output and error as text).

    For tests about a command's result, messages and exit code rather than about the process:
    it skips the ~1.3 s CPU of a fresh interpreter. An argument error (argparse's
    ``SystemExit``) gives its code; an exception escaping ``main`` propagates and fails the test
    (a subprocess would print a traceback, which those tests reject). Warnings raised during the
    run are appended to standard error as a fresh interpreter would print them (default filters:
    DeprecationWarning from library code hidden), so tests that read standard error still see
    them. The tests that need the real entry point (a fresh interpreter's recursion limit,
    writes to /dev/stdout, a FIFO, file descriptors) keep :func:`run_cli`."""
    from comparo.cli.main import main

    out_b, err_b = io.BytesIO(), io.BytesIO()
    out = io.TextIOWrapper(out_b, encoding="utf-8", newline="")
    err = io.TextIOWrapper(err_b, encoding="utf-8", newline="")
    with warnings.catch_warnings(record=True) as caught:
        warnings.resetwarnings()
        warnings.simplefilter("default")
        warnings.filterwarnings("ignore", category=DeprecationWarning)
        warnings.filterwarnings("ignore", category=PendingDeprecationWarning)
        warnings.filterwarnings("ignore", category=ImportWarning)
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            try:
                code = main(list(args))
            except SystemExit as exc:  # argparse: bad option (2) or --help (0)
                code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 2)
                if isinstance(exc.code, str):
                    print(exc.code, file=sys.stderr)
            for w in caught:
                print(
                    warnings.formatwarning(w.message, w.category, w.filename, w.lineno).rstrip(),
                    file=sys.stderr,
                )
    out.flush()
    err.flush()

    def text(b: io.BytesIO) -> str:  # universal newlines, as subprocess.run(text=True) reads them
        return b.getvalue().decode("utf-8").replace("\r\n", "\n").replace("\r", "\n")

    return subprocess.CompletedProcess(["comparo", *args], code, text(out_b), text(err_b))
