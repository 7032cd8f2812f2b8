"""Poroelastic and kinetic time scales and the frequency bounds they imply (SI units)."""

from __future__ import annotations

import math


def constrained_modulus(e, nu):
    """Drained constrained (P-wave) modulus M = E(1−ν)/((1+ν)(1−2ν)) of an isotropic solid.

    Unit of *e*. References: Wang HF (2000) Theory of Linear Poroelasticity,
    Princeton University Press.
    """
    return e * (1.0 - nu) / ((1.0 + nu) * (1.0 - 2.0 * nu))


def poroelastic_diffusivity(k, m, eta):
    """Poroelastic (consolidation) diffusivity D = k·M/η.

    Parameters
    ----------
    k : permeability (m²), m : drained constrained modulus (Pa), eta : fluid
        viscosity (Pa·s). Any consistent units (pint quantities work too).

    Returns
    -------
    D : m²/s for SI inputs.

    Notes
    -----
    Darcy flow q = −(k/η)∇p in a matrix with incompressible constituents gives a
    diffusion equation for the pore pressure with D = k·M/η.

    References
    ----------
    Biot MA (1941) General theory of three-dimensional consolidation. J Appl Phys
    12:155–164. Wang HF (2000) Theory of Linear Poroelasticity.
    """
    return k * m / eta


def poroelastic_time(length, k, m, eta):
    """Poroelastic time τp = l²/D = l²·η/(k·M) (s for SI inputs); no mode factor inside.

    The slowest radial mode of a cylinder of radius l drained at its surface decays
    with time constant τp/j01² (:data:`J01_SQUARED`); that factor is reported
    separately, never folded in here. References: Biot MA (1941) J Appl Phys
    12:155–164.
    """
    return length**2 * eta / (k * m)


def kinetic_time_two_state(f, g):
    """Relaxation time 1/(f + g) of the two-state cross-bridge model (s for rates in 1/s).

    Notes
    -----
    dn/dt = f(1 − n) − g·n relaxes to n = f/(f + g) at rate f + g.

    References
    ----------
    Huxley AF (1957) Muscle structure and theories of contraction. Prog Biophys
    Biophys Chem 7:255–318.

    Examples
    --------
    >>> kinetic_time_two_state(65.0, 15.0)
    0.0125
    """
    return 1.0 / (f + g)


FREQUENCY_BOUNDS = ("corner", "inverse")


def frequency_bound(tau, rule: str = "corner", mode_factor=1.0):
    """Cycle frequency (Hz for τ in s) above which a first-order relaxation of time τ lags.

    ``corner``: f = m/(2πτ), where a first-order process driven sinusoidally has
    its gain down by 1/√2 and its phase lag at 45° (ωτ = 1); ``inverse``: f = m/τ.
    *m* is a mode factor (1 by default).
    """
    if rule == "corner":
        return mode_factor / (2.0 * math.pi * tau)
    if rule == "inverse":
        return mode_factor / tau
    raise ValueError(
        f"unknown frequency bound rule {rule!r}; use one of {', '.join(FREQUENCY_BOUNDS)}"
    )
