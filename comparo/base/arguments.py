"""Bounded work: the sizes and option values comparo accepts before it starts.

A resampling or Monte Carlo run is refused when its estimated memory or time
exceeds what this machine can give, *before* any work is done, with the cap and
how it was computed in the message. The caps are estimates (stated), not
guarantees; they exist so that a typo such as ``--bootstrap 1000000000`` fails at
once instead of running for an hour or exhausting memory.
"""

from __future__ import annotations

import math
import os
from typing import Any

from comparo.base.errors import UsageError

# Fewer resamples than this give percentile/BCa ends that move from seed to seed by
# much more than their width's precision; Efron & Tibshirani (1993, An Introduction to
# the Bootstrap) advise about 1,000 or more for interval endpoints.
MIN_BOOTSTRAP = 200
ADVISED_BOOTSTRAP = 1000
# Work budget of one command (seconds) and the share of memory one run may take.
TIME_BUDGET_S = 600.0
MEMORY_SHARE = 0.5
# Throughputs measured on the development machine (tests/benchmarks/bench_bootstrap.py:
# 10,000 SMA resamples of 500 points in 0.10-0.20 s, i.e. about 3e7 point-draws per second;
# a robust or LTS refit per resample takes about 2-5 ms). Conservative round figures.
VECTOR_POINT_DRAWS_PER_S = 2.0e7
REFITS_PER_S = 200.0


def memory_bytes() -> int:
    """Memory this process may still use, in bytes: physical memory (POSIX sysconf; 8 GiB if
    unknown), or less when the process's address-space limit (``ulimit -v``, RLIMIT_AS) or its
    control group's memory limit is lower, less what the process already holds under that
    limit. At least 64 MiB."""
    try:
        page = int(os.sysconf("SC_PAGE_SIZE"))
        physical = page * int(os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):  # pragma: no cover - non-POSIX
        return 8 * 2**30
    limits = [physical]
    try:
        import resource

        soft = resource.getrlimit(resource.RLIMIT_AS)[0]
        if soft != resource.RLIM_INFINITY:
            limits.append(soft - _statm(0) * page)  # address space already mapped counts
    except (ImportError, OSError, ValueError):  # pragma: no cover - no such limit here
        pass
    group = _cgroup_limit()
    if group is not None:
        limits.append(group - _statm(1) * page)
    return max(min(limits), 64 * 2**20)


def _statm(field: int) -> int:
    """Pages of this process from /proc/self/statm (0: address space, 1: resident); 0 if unknown."""
    try:
        with open("/proc/self/statm", encoding="ascii") as fh:
            return int(fh.read().split()[field])
    except (OSError, ValueError, IndexError):
        return 0


def _cgroup_limit() -> int | None:
    """The memory limit of this process's control group (cgroup v2 or v1), None if none."""
    for path in ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"):
        try:
            with open(path, encoding="ascii") as fh:
                text = fh.read().strip()
        except OSError:
            continue
        if text.isdigit() and int(text) < 2**60:
            return int(text)
    return None


# --------------------------------------------------------------------------- arguments
# One set of checks for the arguments of the public functions (comparo.fit, comparo.derive...):
# a wrong type or value raises UsageError naming the argument and what it accepts, before any
# work, instead of a TypeError or AttributeError from deep inside.


def _shown(value: object) -> str:
    text = repr(value)
    return f"{type(value).__name__} {text[:60] + '...' if len(text) > 60 else text}"


def check_kind(value: object, kinds: type | tuple[type, ...], name: str, accepts: str) -> Any:
    """*value* when it is an instance of *kinds*; else UsageError '<name> must be <accepts>'."""
    if not isinstance(value, kinds):
        raise UsageError(f"{name} must be {accepts} (got {_shown(value)})")
    return value


def check_table(value: object, name: str = "table") -> Any:
    """A pandas DataFrame (one row per taxon)."""
    import pandas as pd

    return check_kind(
        value,
        pd.DataFrame,
        name,
        "a pandas DataFrame with one row per taxon, such as comparo.tabulate(FOLDER)",
    )


def check_name(value: object, name: str, *, optional: bool = False) -> str | None:
    """A column or key name (text); None allowed when *optional*."""
    if value is None and optional:
        return None
    return check_kind(value, str, name, "a column name (text)" + (" or None" if optional else ""))


def check_column(table: Any, column: str, name: str) -> str:
    """*column* is a column of *table*."""
    if column not in table.columns:
        shown = ", ".join(map(str, list(table.columns)[:20]))
        raise UsageError(f"{name} {column!r} is not a column of the table; its columns: {shown}")
    return column


def check_level(value: object, name: str = "ci") -> float:
    """A confidence level: a number strictly between 0 and 1."""
    import numbers

    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not 0 < float(value) < 1:
        raise UsageError(
            f"{name} must be a number strictly between 0 and 1, such as 0.95 (got {_shown(value)})"
        )
    return float(value)


def check_count(value: object, name: str) -> int:
    """A whole number >= 0 (a Python or numpy integer; not a float such as 1e12, not text)."""
    import numbers

    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise UsageError(f"{name} must be a whole number >= 0 (got {_shown(value)})")
    if value < 0:
        raise UsageError(f"{name} must be 0 or a positive number (got {value})")
    return int(value)


def check_path(value: object, name: str) -> Any:
    """A file or folder path (text or os.PathLike)."""
    from pathlib import Path

    check_kind(value, (str, os.PathLike), name, "a path (text or pathlib.Path)")
    if str(value) == "":
        raise UsageError(f"{name} must be a path, not empty text")
    return Path(value)


def check_mapping(value: object, name: str, accepts: str, *, optional: bool = True) -> Any:
    """A mapping (dict); None allowed when *optional*."""
    from collections.abc import Mapping

    if value is None and optional:
        return None
    return check_kind(value, Mapping, name, accepts + (" or None" if optional else ""))


def check_seed(seed: object, option: str = "--seed") -> int:
    """A seed for ``numpy.random.default_rng``: an integer >= 0."""
    if isinstance(seed, bool) or not isinstance(seed, int | float) or not float(seed).is_integer():
        raise UsageError(f"{option} must be a whole number >= 0 (got {seed!r})")
    if seed < 0:
        raise UsageError(
            f"{option} must be >= 0 (got {seed}); numpy's generator takes no negative seeds"
        )
    return int(seed)


def check_finite(value: float | None, option: str) -> float | None:
    """A finite number (or None)."""
    if value is None:
        return None
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise UsageError(f"{option} must be a number (got {value!r})") from None
    if not math.isfinite(v):
        raise UsageError(f"{option} must be a finite number (got {value!r})")
    return v


def check_bootstrap(n_boot: int, n_points: int, method: str) -> int:
    """Resample count for a line bootstrap: 0 (none) or MIN_BOOTSTRAP..cap.

    The cap is the smaller of (a) the count whose two result arrays (slope and
    intercept, 8 bytes each) plus one chunk of draws fit in half of physical memory,
    and (b) the count whose estimated time exceeds TIME_BUDGET_S at the measured
    throughput (point-draws per second for ols/sma/ma, refits per second otherwise).
    """
    if isinstance(n_boot, bool) or not isinstance(n_boot, int):
        raise UsageError(f"--bootstrap must be a whole number (got {n_boot!r})")
    if n_boot == 0:
        return 0
    if n_boot < MIN_BOOTSTRAP:
        raise UsageError(
            f"--bootstrap {n_boot} is too few resamples for a percentile or BCa interval: use at "
            f"least {MIN_BOOTSTRAP} ({ADVISED_BOOTSTRAP} or more advised; Efron & Tibshirani "
            f"1993), or 0 for none"
        )
    by_memory = int(MEMORY_SHARE * memory_bytes() // 16)
    if method in ("ols", "sma", "ma"):
        by_time = int(TIME_BUDGET_S * VECTOR_POINT_DRAWS_PER_S / max(n_points, 1))
        how = f"{VECTOR_POINT_DRAWS_PER_S:.0e} point-draws per second"
    else:
        by_time = int(TIME_BUDGET_S * REFITS_PER_S)
        how = f"{REFITS_PER_S:.0f} refits per second for {method}"
    cap = min(by_memory, by_time)
    if n_boot > cap:
        raise UsageError(
            f"--bootstrap {n_boot} exceeds this machine's cap of {cap} resamples for {n_points} "
            f"points (time: {TIME_BUDGET_S:.0f} s at about {how}; memory: half of the "
            f"{memory_bytes() / 2**30:.1f} GiB "
            "this process may use, at 16 bytes a resample)"
        )
    return n_boot


def check_refits(
    n_boot: int, n_points: int, seconds: float, method: str, option: str = "--bootstrap"
) -> int:
    """A bootstrap that refits *method* once per resample (and once per point for the BCa
    jackknife): refused when that many refits at *seconds* each (the time of the full fit just
    measured on this data, on this machine) exceed TIME_BUDGET_S. LTS and robust fits cost
    tens of milliseconds to seconds each, growing with the points and the machine's load, so
    their cap is measured, not assumed."""
    refits = n_boot + n_points
    if refits * seconds > TIME_BUDGET_S:
        cap = max(int(TIME_BUDGET_S / max(seconds, 1e-9)) - n_points, 0)
        raise UsageError(
            f"{option} {n_boot} would take about {refits * seconds / 60:,.0f} min here: one "
            f"{method} fit of these {n_points} points took {seconds:.3g} s on this machine, and "
            f"the bootstrap refits each resample (and each point once more for BCa); at most {cap} "
            f"resamples fit in {TIME_BUDGET_S:.0f} s "
            "(use method ols, sma or ma for large resample counts)"
        )
    return n_boot


# Measurement-error Monte Carlo of `comparo fit --sensitivity` (the demo, 61 points, 2 cores under
# load): 200,000 draws took about 9 s more than none (1.4e6 point-draws per second) and peak
# memory grew by about 550 bytes a draw (x and y draws, 8 bytes each per point). Round figures:
SENSITIVITY_POINT_DRAWS_PER_S = 1.0e6
SENSITIVITY_BYTES_PER_POINT_DRAW = 16.0


def check_draws(n_draws: int, n_points: int, method: str, option: str = "--mc") -> int:
    """Monte Carlo draws of the measurement-error sensitivity: 0 or up to a cap.

    The cap is the smaller of the draws whose estimated time exceeds TIME_BUDGET_S
    (SENSITIVITY_POINT_DRAWS_PER_S for ols/sma/ma; REFITS_PER_S otherwise) and those
    whose draws (16 bytes per point) exceed half of physical memory.
    """
    if isinstance(n_draws, bool) or not isinstance(n_draws, int):
        raise UsageError(f"{option} must be a whole number (got {n_draws!r})")
    if n_draws < 0:
        raise UsageError(f"{option} must be 0 or a positive number of draws (got {n_draws})")
    n = max(n_points, 1)
    if method in ("ols", "sma", "ma"):
        by_time = int(TIME_BUDGET_S * SENSITIVITY_POINT_DRAWS_PER_S / n)
        how = f"{SENSITIVITY_POINT_DRAWS_PER_S:.0e} point-draws per second"
    else:
        by_time = int(TIME_BUDGET_S * REFITS_PER_S)
        how = f"{REFITS_PER_S:.0f} refits per second for {method}"
    by_memory = int(MEMORY_SHARE * memory_bytes() / (SENSITIVITY_BYTES_PER_POINT_DRAW * n))
    cap = min(by_time, by_memory)
    if n_draws > cap:
        raise UsageError(
            f"{option} {n_draws} exceeds this machine's cap of {cap} draws for {n_points} taxa "
            f"(time: {TIME_BUDGET_S:.0f} s at about {how}; memory: half of the "
            f"{memory_bytes() / 2**30:.1f} GiB this process may use, at "
            f"{SENSITIVITY_BYTES_PER_POINT_DRAW:.0f} bytes per point and draw)"
        )
    return n_draws


# Derivation Monte Carlo: measured with `comparo derive` on the 60-taxon demo on 2 cores
# under load (tests/benchmarks/bench_derive.py route): 2e6 draws took 167 s (7e5 taxon-draws
# per second) and peak memory grew by about 270 bytes per draw of one taxon block.
# Conservative round figures:
MC_TAXON_DRAWS_PER_S = 5.0e5
MC_BYTES_PER_DRAW = 300.0


def check_mc(mc: int, n_taxa: int, option: str = "--mc") -> int:
    """Monte Carlo draws per taxon for :func:`comparo.derive`: 0 (first order only) up to a cap.

    The cap is the smaller of (a) the draws whose estimated time for *n_taxa* taxa
    exceeds TIME_BUDGET_S at MC_TAXON_DRAWS_PER_S, and (b) the draws whose block (one
    taxon at a time at the largest sizes, two blocks in flight) exceeds half of physical
    memory at MC_BYTES_PER_DRAW.
    """
    if isinstance(mc, bool) or not isinstance(mc, int):
        raise UsageError(f"{option} must be a whole number (got {mc!r})")
    if mc < 0:
        raise UsageError(f"{option} must be 0 or a positive number of draws (got {mc})")
    if mc == 0:
        return 0
    by_time = int(TIME_BUDGET_S * MC_TAXON_DRAWS_PER_S / max(n_taxa, 1))
    by_memory = int(MEMORY_SHARE * memory_bytes() / (2 * MC_BYTES_PER_DRAW))
    cap = min(by_time, by_memory)
    if mc > cap:
        raise UsageError(
            f"{option} {mc} exceeds this machine's cap of {cap} draws for {n_taxa} taxa (time: "
            f"{TIME_BUDGET_S:.0f} s at about {MC_TAXON_DRAWS_PER_S:.0e} taxon-draws per second; "
            f"memory: half of the {memory_bytes() / 2**30:.1f} GiB this process may use, at about "
            f"{MC_BYTES_PER_DRAW:.0f} bytes a draw, "
            "two blocks in flight)"
        )
    return mc


# Blomberg's K permutation test (comparo.phylo.tree_signal): 2,000 permutations of a 2,000-tip
# tree took 0.58 s on 2 cores under load (7e6 tip-permutations per second; the state is built
# in blocks of at most ~160 MB, so memory does not grow with the count). Conservative figure:
PERMUTATION_TIPS_PER_S = 1.0e6


def check_permutations(permutations: int, n_tips: int, option: str = "permutations") -> int:
    """Permutation count of a signal test: 0 (no test) up to the count whose estimated time
    exceeds TIME_BUDGET_S at PERMUTATION_TIPS_PER_S for *n_tips* tips."""
    if isinstance(permutations, bool) or not isinstance(permutations, int):
        raise UsageError(f"{option} must be a whole number (got {permutations!r})")
    if permutations < 0:
        raise UsageError(f"{option} must be 0 or a positive number (got {permutations})")
    cap = int(TIME_BUDGET_S * PERMUTATION_TIPS_PER_S / max(n_tips, 1))
    if permutations > cap:
        raise UsageError(
            f"{option} {permutations} exceeds this machine's cap of {cap} permutations for "
            f"{n_tips} tips (time: {TIME_BUDGET_S:.0f} s at about {PERMUTATION_TIPS_PER_S:.0e} "
            f"tip-permutations per second)"
        )
    return permutations
