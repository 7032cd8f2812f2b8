"""Which process limits a taxon, with the uncertainty of the comparison: the regime
(``kinetic``, ``hydraulic`` or ``undetermined``) from the 95% interval of Π, and where the
observed frequency sits against the smaller bound (``below``, ``above``, ``undetermined``).

Rules and references: docs/methods/derived.md, "Frequency bounds, ratio and regime".
"""

from __future__ import annotations

import numpy as np

#: Standard normal 0.975 quantile: the coverage factor of a 95% interval (JCGM 100:2008, G.3).
Z95 = 1.959963984540054


def interval95(value, u, mc_lo=None, mc_hi=None) -> tuple[np.ndarray, np.ndarray]:
    """The 95% interval of a positive derived value (same unit as *value*).

    First order: value·exp(±1.96·u/value), the interval on the log scale on which the
    uncertainty is propagated. With Monte Carlo ends (*mc_lo*, *mc_hi*, JCGM 101:2008,
    7.7) those are used instead. NaN where the value or its uncertainty is unknown.
    """
    value = np.asarray(value, dtype=float)
    if mc_lo is not None and mc_hi is not None:
        return np.asarray(mc_lo, dtype=float), np.asarray(mc_hi, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        half = Z95 * np.asarray(u, dtype=float) / value
        return value * np.exp(-half), value * np.exp(half)


def side_of(value, lo, hi, boundary, above: str, below: str) -> np.ndarray:
    """Per row *above* when the interval lies above *boundary*, *below* when under it,
    ``undetermined`` when it holds the boundary or is unknown, None without a value."""
    value, lo, hi = (np.asarray(a, dtype=float) for a in (value, lo, hi))
    out = np.full(value.shape, "undetermined", dtype=object)
    with np.errstate(invalid="ignore"):
        out[lo > boundary] = above
        out[hi < boundary] = below
    out[~np.isfinite(value)] = None
    return out


def regime(pi, pi_u, mode_factor: float = 1.0, mc_lo=None, mc_hi=None) -> np.ndarray:
    """``hydraulic`` when the 95% interval of Π = τ_p/τ_xb lies above the boundary Π = m
    (the hydraulic mode factor, 1 by default: there the two frequency bounds are equal),
    ``kinetic`` when below it, ``undetermined`` when it holds it or is unknown."""
    lo, hi = interval95(pi, pi_u, mc_lo, mc_hi)
    return side_of(pi, lo, hi, float(mode_factor), "hydraulic", "kinetic")


def frequency_vs_bound(ratio, ratio_u, mc_lo=None, mc_hi=None) -> np.ndarray:
    """``above`` when the 95% interval of f_obs / smaller bound lies above 1 (the taxon
    cycles faster than its smaller bound beyond the uncertainty), ``below`` when under 1,
    ``undetermined`` when it holds 1 or is unknown, None without a frequency ratio."""
    lo, hi = interval95(ratio, ratio_u, mc_lo, mc_hi)
    return side_of(ratio, lo, hi, 1.0, "above", "below")
