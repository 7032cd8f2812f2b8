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

from comparo.errors import UsageError

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
    """Physical memory of this machine in bytes (POSIX sysconf; 8 GiB if unknown)."""
    try:
        return int(os.sysconf("SC_PAGE_SIZE")) * int(os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):  # pragma: no cover - non-POSIX
        return 8 * 2**30


def check_seed(seed: object, option: str = "--seed") -> int:
    """A seed for ``numpy.random.default_rng``: an integer >= 0."""
    if isinstance(seed, bool) or not isinstance(seed, int | float) or not float(seed).is_integer():
        raise UsageError(f"{option} must be a whole number >= 0 (got {seed!r})")
    if seed < 0:
        raise UsageError(f"{option} must be >= 0 (got {seed}); numpy's generator takes no negative seeds")
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
            f"--bootstrap {n_boot} is too few resamples for a percentile or BCa interval: use at least "
            f"{MIN_BOOTSTRAP} ({ADVISED_BOOTSTRAP} or more advised; Efron & Tibshirani 1993), or 0 for none")
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
            f"--bootstrap {n_boot} exceeds this machine's cap of {cap} resamples for {n_points} points "
            f"(time: {TIME_BUDGET_S:.0f} s at about {how}; memory: half of {memory_bytes() / 2**30:.1f} GiB "
            "at 16 bytes a resample)")
    return n_boot
