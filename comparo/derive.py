"""Derived time scales and dimensionless ratios, with propagated uncertainty.

From the per-taxon table (one row per taxon, values in the catalogue's canonical
units) this module computes the myofilament lattice geometry, a lattice
permeability, the poroelastic diffusivity and time of the fiber, the cross-bridge
kinetic time, their ratio, the frequency bounds they imply and which process is
limiting. Every derived value gets a first-order (GUM) standard uncertainty, on
request Monte Carlo intervals, the weakest basis of its inputs and the obs_ids it
rests on. User ratios (``[ratios]`` in comparo.toml) are parsed by a small grammar
of our own (``*``, ``/``, ``^`` and parentheses over quantity keys), never by eval.

Internally every quantity is in SI base units; conversions to and from the
catalogue units go through :func:`comparo.units.conversion_factor`.

These are order-of-magnitude physical estimates, not measurements: see
docs/methods/derived.md.
"""

from __future__ import annotations

import math
import os
import re
from collections.abc import Callable, Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from comparo.errors import InputError, Problem

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = [
    "BASIS_ORDER",
    "HEXAGONAL_PACKING_LIMIT",
    "J01_SQUARED",
    "PERMEABILITY_MODELS",
    "Ratio",
    "constrained_modulus",
    "derive",
    "effective_radius",
    "filament_spacing",
    "filament_volume_fraction",
    "frequency_bound",
    "gum_relative",
    "kinetic_time_two_state",
    "parse_ratio",
    "permeability",
    "poroelastic_diffusivity",
    "poroelastic_time",
    "sample_inputs",
    "thick_thin_distance",
    "unit_cell_area",
    "water_density",
    "water_viscosity",
    "water_viscosity_at",
]

#: Bases from strongest to weakest (the weakest one among a value's inputs is its basis).
BASIS_ORDER = ("reported", "computed", "digitized", "proxy", "assumed")

#: Largest solid fraction of equal parallel cylinders (hexagonal packing), pi/(2*sqrt(3)).
HEXAGONAL_PACKING_LIMIT = math.pi / (2.0 * math.sqrt(3.0))

#: Square of the first zero of the Bessel function J0, j01 = 2.404825557695773
#: (Abramowitz & Stegun 1964, Table 9.5): the slowest radial diffusion mode of a
#: cylinder drained at its surface decays as exp(-j01^2 * D * t / a^2).
J01_SQUARED = 2.404825557695773**2


# --------------------------------------------------------------------------- lattice


def filament_spacing(d10):
    """Thick-filament centre-to-centre distance of a hexagonal lattice.

    Parameters
    ----------
    d10 : array_like
        Spacing of the 1,0 lattice planes (any length unit).

    Returns
    -------
    d : same type and unit as *d10*

    Notes
    -----
    The 1,0 planes of a hexagonal lattice of spacing d are d10 = (sqrt(3)/2)·d
    apart, so d = 2·d10/sqrt(3).

    References
    ----------
    Millman BM (1998) The filament lattice of striated muscle. Physiol Rev
    78:359–391.

    Examples
    --------
    >>> round(float(filament_spacing(37.0)), 4)
    42.7239
    """
    return 2.0 * d10 / math.sqrt(3.0)


def thick_thin_distance(d10):
    """Thick-to-thin filament centre distance, d/sqrt(3) = 2·d10/3 (unit of *d10*).

    The thin filaments sit at the trigonal points of the hexagonal thick-filament
    lattice (Millman 1998, Physiol Rev 78:359–391).
    """
    return 2.0 * d10 / 3.0


def unit_cell_area(d):
    """Cross-sectional area per thick filament, A = (sqrt(3)/2)·d² (unit of *d* squared)."""
    return math.sqrt(3.0) / 2.0 * d**2


def filament_volume_fraction(d10, r_thick, r_thin, thin_per_thick=2):
    """Solid (filament) volume fraction of the hexagonal myofilament lattice.

    Parameters
    ----------
    d10 : array_like
        1,0 lattice spacing (length; same unit as the radii).
    r_thick, r_thin : array_like
        Thick- and thin-filament radii (length).
    thin_per_thick : array_like
        Thin filaments per thick filament in the unit cell: 2 in vertebrate
        skeletal muscle, 3 in insect flight muscle.

    Returns
    -------
    phi : array_like, dimensionless

    Notes
    -----
    phi = pi·(r_thick² + n·r_thin²) / A,  A = (sqrt(3)/2)·d²,  d = 2·d10/sqrt(3).
    Filaments are treated as solid cylinders; the fraction refers to the lattice
    (myofibril), not to the whole fiber.

    References
    ----------
    Millman BM (1998) Physiol Rev 78:359–391 (lattice geometry).
    """
    d = filament_spacing(d10)
    return math.pi * (r_thick**2 + thin_per_thick * r_thin**2) / unit_cell_area(d)


def effective_radius(r_thick, r_thin, thin_per_thick=2, rule: str = "volume_to_surface"):
    """One cylinder radius standing for the mixed thick/thin lattice (unit of the radii).

    ``volume_to_surface``: a = (r_m² + n·r_a²)/(r_m + n·r_a), equal cylinders with
    the same solid volume and wetted surface as the unit cell (common practice).
    ``area_equivalent``: a = sqrt((r_m² + n·r_a²)/(1 + n)), same solid area and
    filament count.
    """
    s2 = r_thick**2 + thin_per_thick * r_thin**2
    if rule == "volume_to_surface":
        return s2 / (r_thick + thin_per_thick * r_thin)
    if rule == "area_equivalent":
        return (s2 / (1.0 + thin_per_thick)) ** 0.5
    raise ValueError(f"unknown effective radius rule {rule!r}")


# --------------------------------------------------------------------- permeability


def _happel_parallel(phi):
    return (-np.log(phi) - 1.5 + 2.0 * phi - 0.5 * phi**2) / (4.0 * phi)


def _happel_transverse(phi):
    return (-np.log(phi) - (1.0 - phi**2) / (1.0 + phi**2)) / (8.0 * phi)


def _kuwabara_transverse(phi):
    return (-np.log(phi) - 1.5 + 2.0 * phi - 0.5 * phi**2) / (8.0 * phi)


def _jackson_james(phi):
    return 3.0 * (-np.log(phi) - 0.931) / (20.0 * phi)


def _gebart_transverse(phi):
    c1 = 16.0 / (9.0 * math.pi * math.sqrt(6.0))
    return c1 * np.maximum(np.sqrt(HEXAGONAL_PACKING_LIMIT / phi) - 1.0, 0.0) ** 2.5


def _gebart_parallel(phi):
    return 8.0 / 53.0 * (1.0 - phi) ** 3 / phi**2


@dataclass(frozen=True)
class PermeabilityModel:
    """A published k/a² = g(phi) relation and the solid fractions it is used for."""

    name: str
    function: Callable[[Any], Any]
    phi_min: float
    phi_max: float
    reference: str

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "phi_min": self.phi_min, "phi_max": self.phi_max, "reference": self.reference}


#: Permeability models by setting name; a fraction outside (phi_min, phi_max] gives no value.
PERMEABILITY_MODELS: dict[str, PermeabilityModel] = {
    m.name: m
    for m in (
        PermeabilityModel("happel_parallel", _happel_parallel, 0.0, HEXAGONAL_PACKING_LIMIT,
                          "Happel J (1959) AIChE J 5:174-177, flow along the cylinders"),
        PermeabilityModel("happel_transverse", _happel_transverse, 0.0, HEXAGONAL_PACKING_LIMIT,
                          "Happel J (1959) AIChE J 5:174-177, flow across the cylinders"),
        PermeabilityModel("kuwabara_transverse", _kuwabara_transverse, 0.0, HEXAGONAL_PACKING_LIMIT,
                          "Kuwabara S (1959) J Phys Soc Jpn 14:527-532, flow across the cylinders"),
        PermeabilityModel("jackson_james", _jackson_james, 0.0, 0.3,
                          "Jackson GW, James DF (1986) Can J Chem Eng 64:364-374, random 3-D fibres"),
        PermeabilityModel("kozeny_carman", None, 0.0, HEXAGONAL_PACKING_LIMIT,  # type: ignore[arg-type]
                          "Carman PC (1937) Trans IChemE 15:150-166"),
        PermeabilityModel("gebart_transverse", _gebart_transverse, 0.0, HEXAGONAL_PACKING_LIMIT,
                          "Gebart BR (1992) J Compos Mater 26:1100-1133, hexagonal packing, across"),
        PermeabilityModel("gebart_parallel", _gebart_parallel, 0.0, HEXAGONAL_PACKING_LIMIT,
                          "Gebart BR (1992) J Compos Mater 26:1100-1133, hexagonal packing, along"),
    )
}


def permeability(a, phi, model: str = "happel_parallel", kozeny_constant: float = 5.0):
    """Darcy permeability of an array of aligned cylinders.

    Parameters
    ----------
    a : array_like
        Cylinder radius (length); k comes out in that unit squared.
    phi : array_like
        Solid volume fraction (dimensionless), 0 < phi < 1.
    model : str
        One of :data:`PERMEABILITY_MODELS`.
    kozeny_constant : float
        K of the Kozeny–Carman relation (about 5).

    Returns
    -------
    k : array_like, unit of *a* squared. NaN where phi is outside the model's range.

    Notes
    -----
    With g = k/a²:

    - happel_parallel: g = (−ln φ − 3/2 + 2φ − φ²/2)/(4φ)
    - happel_transverse: g = (−ln φ − (1 − φ²)/(1 + φ²))/(8φ)
    - kuwabara_transverse: g = (−ln φ − 3/2 + 2φ − φ²/2)/(8φ)
    - jackson_james: g = 3(−ln φ − 0.931)/(20φ), for φ ≤ 0.3 (negative above ≈ 0.39)
    - kozeny_carman: g = (1 − φ)³/(4Kφ²), poor for dilute arrays
    - gebart_transverse: g = C1(√(φmax/φ) − 1)^(5/2), C1 = 16/(9π√6), φmax = π/(2√3)
    - gebart_parallel: g = (8/53)(1 − φ)³/φ²

    The Happel and Kuwabara cell models vanish as φ → 1, Gebart's transverse
    relation at the hexagonal packing limit φmax.

    References
    ----------
    Happel J (1959) Viscous flow relative to arrays of cylinders. AIChE J 5:174–177.
    Kuwabara S (1959) J Phys Soc Jpn 14:527–532.
    Jackson GW, James DF (1986) Can J Chem Eng 64:364–374.
    Carman PC (1937) Trans Inst Chem Eng 15:150–166.
    Gebart BR (1992) J Compos Mater 26:1100–1133.
    """
    try:
        spec = PERMEABILITY_MODELS[model]
    except KeyError:
        raise ValueError(f"unknown permeability model {model!r}; use one of {', '.join(PERMEABILITY_MODELS)}") from None
    phi = np.asarray(phi)
    if not np.issubdtype(phi.dtype, np.floating):
        phi = phi.astype(float)
    ok = (phi > spec.phi_min) & (phi <= spec.phi_max)
    safe = np.where(ok, phi, phi.dtype.type(0.5))
    if model == "kozeny_carman":
        g = (1.0 - safe) ** 3 / (4.0 * kozeny_constant * safe**2)
    else:
        g = spec.function(safe)
    g = np.where(ok, g, phi.dtype.type(np.nan))
    return a**2 * g


# ------------------------------------------------------------------- water (IAPWS)

_TC, _RHOC, _MU_STAR = 647.096, 322.0, 1.0e-6  # K, kg/m3, Pa s (IAPWS R12-08)
_H0 = (1.67752, 2.20462, 0.6366564, -0.241605)
# H_ij of IAPWS R12-08 Table 2 (i = power of 1/T - 1, j = power of rho - 1); zeros omitted
_HIJ = (
    (0, 0, 5.20094e-1), (1, 0, 8.50895e-2), (2, 0, -1.08374), (3, 0, -2.89555e-1),
    (0, 1, 2.22531e-1), (1, 1, 9.99115e-1), (2, 1, 1.88797), (3, 1, 1.26613), (5, 1, 1.20573e-1),
    (0, 2, -2.81378e-1), (1, 2, -9.06851e-1), (2, 2, -7.72479e-1), (3, 2, -4.89837e-1), (4, 2, -2.57040e-1),
    (0, 3, 1.61913e-1), (1, 3, 2.57399e-1),
    (0, 4, -3.25372e-2), (3, 4, 6.98452e-2),
    (4, 5, 8.72102e-3),
    (3, 6, -4.35673e-3), (5, 6, -5.93264e-4),
)

# IAPWS-IF97 region 1 (Table 2 of the release): exponents I, J and coefficients n
_IF97_I = (0, 0, 0, 0, 0, 0, 0, 0, 1, 1, 1, 1, 1, 1, 2, 2, 2, 2, 2, 3, 3, 3, 4, 4, 4, 5, 8, 8, 21, 23, 29, 30, 31, 32)
_IF97_J = (-2, -1, 0, 1, 2, 3, 4, 5, -9, -7, -1, 0, 1, 3, -3, 0, 1, 3, 17, -4, 0, 6, -5, -2, 10, -8, -11, -6,
           -29, -31, -38, -39, -40, -41)
_IF97_N = (
    0.14632971213167, -0.84548187169114, -0.37563603672040e1, 0.33855169168385e1, -0.95791963387872,
    0.15772038513228, -0.16616417199501e-1, 0.81214629983568e-3, 0.28319080123804e-3, -0.60706301565874e-3,
    -0.18990068218419e-1, -0.32529748770505e-1, -0.21841717175414e-1, -0.52838357969930e-4,
    -0.47184321073267e-3, -0.30001780793026e-3, 0.47661393906987e-4, -0.44141845330846e-5,
    -0.72694996297594e-15, -0.31679644845054e-4, -0.28270797985312e-5, -0.85205128120103e-9,
    -0.22425281908000e-5, -0.65171222895601e-6, -0.14341729937924e-12, -0.40516996860117e-6,
    -0.12734301741641e-8, -0.17424871230634e-9, -0.68762131295531e-18, 0.14478307828521e-19,
    0.26335781662795e-22, -0.11947622640071e-22, 0.18228094581404e-23, -0.93537087292458e-25,
)
_IF97_R = 0.461526  # kJ/(kg K), specific gas constant of water in IF97

#: Temperatures (°C) for which liquid water at 0.1 MPa is computed (0.1 MPa boils at 99.6 °C).
WATER_RANGE_C = (0.0, 99.0)


def water_density(temperature_k, pressure_mpa=0.1):
    """Density of liquid water (kg/m³) from IAPWS-IF97 region 1.

    Parameters
    ----------
    temperature_k : array_like
        Temperature in K, 273.15–623.15 K, liquid (pressure above saturation).
    pressure_mpa : array_like
        Pressure in MPa.

    Notes
    -----
    Specific Gibbs energy g/(RT) = γ(π, τ) = Σ nᵢ(7.1 − π)^Iᵢ(τ − 1.222)^Jᵢ with
    π = p/16.53 MPa, τ = 1386 K/T; the specific volume is v = (RT/p)·π·∂γ/∂π,
    R = 0.461526 kJ/(kg K), and ρ = 1/v.

    References
    ----------
    IAPWS (2007) Revised Release on the IAPWS Industrial Formulation 1997 for the
    Thermodynamic Properties of Water and Steam (IAPWS R7-97), region 1;
    Wagner W et al. (2000) J Eng Gas Turbines Power 122:150–182.
    """
    t = np.asarray(temperature_k, dtype=float)
    p = np.asarray(pressure_mpa, dtype=float)
    pi = p / 16.53
    tau = 1386.0 / t
    gamma_pi = np.zeros(np.broadcast(t, p).shape)
    for i, j, n in zip(_IF97_I, _IF97_J, _IF97_N, strict=True):
        if i:
            gamma_pi = gamma_pi - n * i * (7.1 - pi) ** (i - 1) * (tau - 1.222) ** j
    v = _IF97_R * t * pi * gamma_pi / (p * 1000.0)  # kJ/kg / kPa = m3/kg
    return 1.0 / v


def water_viscosity(density, temperature_k):
    """Viscosity of water (Pa·s) from density and temperature, IAPWS R12-08.

    Parameters
    ----------
    density : array_like
        kg/m³.
    temperature_k : array_like
        K.

    Notes
    -----
    μ = μ*·μ̄0(T̄)·μ̄1(T̄, ρ̄)·μ̄2, with T̄ = T/647.096 K, ρ̄ = ρ/322 kg/m³,
    μ* = 1 µPa·s;  μ̄0 = 100·√T̄ / Σᵢ₌₀³ Hᵢ/T̄ⁱ;
    μ̄1 = exp[ρ̄ Σᵢ (1/T̄ − 1)ⁱ Σⱼ Hᵢⱼ(ρ̄ − 1)ʲ].
    The critical enhancement μ̄2 is 1 outside a small region around the critical
    point and is omitted (the release recommends μ̄2 = 1 for industrial use).

    References
    ----------
    IAPWS (2008) Release on the IAPWS Formulation 2008 for the Viscosity of Ordinary
    Water Substance (IAPWS R12-08); Huber ML, Perkins RA, Laesecke A, Friend DG,
    Sengers JV, Assael MJ, Metaxa IN, Vogel E, Mareš R, Miyagawa K (2009) J Phys
    Chem Ref Data 38:101–125.

    Examples
    --------
    >>> round(float(water_viscosity(998.0, 298.15)) * 1e6, 6)
    889.7351
    """
    tr = np.asarray(temperature_k, dtype=float) / _TC
    dr = np.asarray(density, dtype=float) / _RHOC
    mu0 = 100.0 * np.sqrt(tr) / sum(h / tr**i for i, h in enumerate(_H0))
    s = sum(h * (1.0 / tr - 1.0) ** i * (dr - 1.0) ** j for i, j, h in _HIJ)
    mu1 = np.exp(dr * s)
    return _MU_STAR * mu0 * mu1


def water_viscosity_at(temperature_c, pressure_mpa=0.1):
    """Viscosity of liquid water (Pa·s) at a temperature in °C and 0.1 MPa.

    Density from IAPWS-IF97 region 1 (:func:`water_density`), viscosity from
    IAPWS R12-08 (:func:`water_viscosity`). NaN outside :data:`WATER_RANGE_C`.

    Examples
    --------
    >>> round(float(water_viscosity_at(20.0)) * 1e3, 5)
    1.0016
    """
    t = np.asarray(temperature_c, dtype=float)
    ok = (t >= WATER_RANGE_C[0]) & (t <= WATER_RANGE_C[1])
    tk = np.where(ok, t, 20.0) + 273.15
    mu = water_viscosity(water_density(tk, pressure_mpa), tk)
    return np.where(ok, mu, np.nan)


# ------------------------------------------------------------- poroelastic, kinetic


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
    raise ValueError(f"unknown frequency bound rule {rule!r}; use one of {', '.join(FREQUENCY_BOUNDS)}")


# ---------------------------------------------------------------------- uncertainty


def gum_relative(exponents: Mapping[str, float], relative_u: Mapping[str, Any]):
    """First-order relative standard uncertainty of y = c·Π xᵢ^pᵢ, inputs uncorrelated.

    (u_y/y)² = Σ (pᵢ·u(xᵢ)/xᵢ)²  (JCGM 100:2008, 5.1.6).

    Parameters
    ----------
    exponents : mapping name -> pᵢ
    relative_u : mapping name -> u(xᵢ)/xᵢ (arrays broadcast)
    """
    total = 0.0
    for name, p in exponents.items():
        total = total + (p * np.asarray(relative_u[name], dtype=float)) ** 2
    return np.sqrt(total)


def sample_inputs(values: Mapping[str, Any], uncertainties: Mapping[str, Any], draws: int,
                  rng: np.random.Generator, distribution: str = "lognormal",
                  dtype: type = np.float64) -> dict[str, np.ndarray]:
    """Monte Carlo draws of independent inputs (JCGM 101:2008), in the order of *values*.

    Parameters
    ----------
    values, uncertainties : mappings name -> array of n best estimates and standard
        uncertainties (same unit). An uncertainty of 0 or NaN gives the value itself.
    draws : int
        Draws per value.
    rng : numpy.random.Generator
    distribution : ``lognormal`` (positive quantities: mean = value, sd =
        uncertainty, σ² = ln(1 + (u/x)²), μ = ln x − σ²/2) or ``normal``.
    dtype : numpy float type of the draws (float32 halves time and memory).

    Returns
    -------
    dict name -> array of shape (n, draws); one ``rng.standard_normal((n, draws))``
    call per input, in order.
    """
    out: dict[str, np.ndarray] = {}
    for name, x in values.items():
        x = np.atleast_1d(np.asarray(x, dtype=float))
        u = np.broadcast_to(np.atleast_1d(np.asarray(uncertainties[name], dtype=float)), x.shape)
        u = np.where(np.isfinite(u) & (u > 0), u, 0.0)
        z = rng.standard_normal((x.size, draws), dtype=dtype)
        if distribution == "normal":
            out[name] = (x[:, None] + u[:, None] * z).astype(dtype, copy=False)
        elif distribution == "lognormal":
            with np.errstate(divide="ignore", invalid="ignore"):
                s2 = np.log1p((u / x) ** 2)
            s2 = np.where(np.isfinite(s2), s2, 0.0)
            sig = np.sqrt(s2).astype(dtype)[:, None]
            z *= sig
            z -= (0.5 * s2).astype(dtype)[:, None]
            np.exp(z, out=z)
            z *= x.astype(dtype)[:, None]
            out[name] = z
        else:
            raise ValueError(f"unknown distribution {distribution!r}")
    return out


def coverage_ranks(m, p: float):
    """1-based ranks (r, r + q) of the probabilistically symmetric 100p% coverage
    interval from m sorted draws: q = ⌊pm + 1/2⌋, r = ⌈(m − q)/2⌉ (JCGM 101:2008, 7.7)."""
    m = np.asarray(m)
    q = np.floor(p * m + 0.5).astype(np.int64)
    r = (m - q + 1) // 2
    return np.maximum(r, 1), np.minimum(r + q, m)


_MC_SUFFIXES = ("_mc_lo95", "_mc_lo68", "_mc_median", "_mc_hi68", "_mc_hi95")
_STEP = 1.0e-5  # log-scale step of the numerical sensitivities


@dataclass(frozen=True)
class _Propagation:
    values: dict[str, np.ndarray]
    u: dict[str, np.ndarray]
    deps: dict[str, dict[str, np.ndarray]]  # output -> leaf -> bool per row
    unknown_u: dict[str, list[list[str]]]  # output -> per row, leaves lacking u
    mc: dict[str, dict[str, np.ndarray]]  # output -> suffix -> array


def _propagate(compute: Callable[[dict[str, Any]], dict[str, Any]], leaves: dict[str, np.ndarray],
               rel_u: dict[str, np.ndarray], ignore_unknown: bool, mc: int,
               rng: np.random.Generator | None, mc_outputs: list[str] | None = None,
               mirrors: dict[str, tuple[str, Callable[[Any], Any]]] | None = None,
               progress: bool = False) -> _Propagation:
    """Values, GUM uncertainties, lineage and Monte Carlo summaries of compute(leaves).

    First order on the log scale: cᵢ = ∂ln y/∂ln xᵢ by central differences of step
    h (exact for products of powers up to rounding), (u_y/y)² = Σ cᵢ²(u_i/x_i)²
    (JCGM 100:2008, correlations ignored). A leaf is in a row's lineage when
    the output changes with it or vanishes without it.
    """
    base = compute(leaves)
    n = len(next(iter(leaves.values())))
    var = {k: np.zeros(n) for k in base}
    deps: dict[str, dict[str, np.ndarray]] = {k: {} for k in base}
    unknown = {k: np.zeros(n, dtype=bool) for k in base}
    unknown_names: dict[str, list[list[str]]] = {k: [[] for _ in range(n)] for k in base}
    with np.errstate(all="ignore"):
        for name, x in leaves.items():
            up = compute({**leaves, name: x * math.exp(_STEP)})
            dn = compute({**leaves, name: x * math.exp(-_STEP)})
            gone = compute({**leaves, name: np.full_like(x, np.nan)})
            r = rel_u[name]
            for key, y in base.items():
                c = np.log(up[key] / dn[key]) / (2.0 * _STEP)
                c = np.where(np.isfinite(c), c, 0.0)
                used = (c != 0.0) | (np.isnan(gone[key]) & ~np.isnan(y))
                deps[key][name] = used & ~np.isnan(y)
                lacks = used & ~np.isfinite(r)
                contrib = np.where(c != 0.0, (c * np.where(np.isfinite(r), r, 0.0)) ** 2, 0.0)
                var[key] = var[key] + contrib
                if lacks.any():
                    unknown[key] |= lacks
                    for i in np.flatnonzero(lacks & ~np.isnan(y)):
                        unknown_names[key][i].append(name)
    u = {}
    for key, y in base.items():
        uu = np.abs(y) * np.sqrt(var[key])
        if not ignore_unknown:
            uu = np.where(unknown[key], np.nan, uu)
        u[key] = np.where(np.isnan(y), np.nan, uu)
    summaries: dict[str, dict[str, np.ndarray]] = {}
    if mc > 0:
        summaries = _monte_carlo(compute, leaves, rel_u, mc, rng, mc_outputs or list(base), mirrors, progress)
        for key, s in summaries.items():
            bad = np.isnan(u[key])
            for arr in s.values():
                arr[bad] = np.nan
    return _Propagation(base, u, deps, unknown_names, summaries)


def _monte_carlo(compute, leaves, rel_u, mc, rng, outputs, mirrors=None, progress: bool = False):
    """Vectorised Monte Carlo over taxa in blocks of about 1e6 float32 draws (JCGM 101:2008).

    Intervals are order statistics of the sorted draws (JCGM 101:2008, 7.7):
    68% and 95% probabilistically symmetric, the median at the middle rank(s).
    *mirrors* maps an output to (source output, decreasing function): its order
    statistics are read off the sorted source draws at the mirrored ranks, which is
    exact and saves a sort.

    The draws are made in one thread, block after block, in a fixed order (so a seed
    gives the same numbers whatever the timing); each drawn block is evaluated and
    its outputs sorted on a worker thread while the next block is drawn (numpy
    releases the GIL in both), with at most two blocks in flight to bound memory.
    """
    mirrors = mirrors or {}
    n = len(next(iter(leaves.values())))
    block = max(1, 1_000_000 // mc)
    drawn = [k for k, r in rel_u.items() if np.any(np.isfinite(r) & (r > 0))]
    res = {k: {s: np.full(n, np.nan) for s in (*_MC_SUFFIXES, "_mc_u")} for k in outputs}
    in_flight: list[Any] = []
    bar = _mc_bar(progress and n * mc >= 2_000_000, -(-n // block))
    with bar, ThreadPoolExecutor(max_workers=min(2, os.cpu_count() or 1)) as pool:
        task = bar.add_task(f"Monte Carlo, {mc} draws", total=-(-n // block))
        for start in range(0, n, block):
            stop = min(n, start + block)
            vals = {k: v[start:stop] for k, v in leaves.items()}
            samples = sample_inputs({k: vals[k] for k in drawn},
                                    {k: vals[k] * rel_u[k][start:stop] for k in drawn}, mc, rng, dtype=np.float32)
            args = {k: (samples[k] if k in samples else v.astype(np.float32)[:, None]) for k, v in vals.items()}
            del samples
            in_flight.append(pool.submit(_mc_block, compute, args, slice(start, stop), mc, outputs, mirrors, res))
            del args
            if len(in_flight) > 1:  # at most two blocks drawn and not yet summarised
                in_flight.pop(0).result()
                bar.advance(task)
        for f in in_flight:
            f.result()
            bar.advance(task)
    return res


class _NoBar:
    def __enter__(self):
        return self

    def __exit__(self, *exc) -> bool:
        return False

    def add_task(self, *args, **kwargs) -> int:
        return 0

    def advance(self, *args) -> None:
        return None


def _mc_bar(enabled: bool, total: int):
    """A transient rich progress bar on standard error (for a terminal), else a no-op."""
    if not enabled or total < 2:
        return _NoBar()
    from rich.console import Console
    from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn

    return Progress(TextColumn("{task.description}"), BarColumn(), TimeRemainingColumn(),
                    console=Console(stderr=True), transient=True)


def _mc_block(compute, args, sl, mc, outputs, mirrors, res) -> None:
    """Evaluate one block of draws and write every output's summaries (a worker thread)."""
    rows = sl.stop - sl.start
    with np.errstate(all="ignore"):
        out = compute(args)
    for key in outputs:
        if key not in mirrors:
            _summarise(key, np.broadcast_to(out[key], (rows, mc)), mc, mirrors, res, sl)
    for key in mirrors:
        if key in res:
            res[key]["_mc_u"][sl] = _sd(np.broadcast_to(out[key], (rows, mc)))


def _sd(y: np.ndarray) -> np.ndarray:
    """Row-wise sample standard deviation of the finite draws (NaN with fewer than 2)."""
    with np.errstate(all="ignore"):
        finite = np.isfinite(y)
        if finite.all():
            return y.std(axis=1, ddof=1, dtype=np.float64)
        m = finite.sum(axis=1)
        z = np.where(finite, y, 0.0).astype(np.float64)
        mean = z.sum(axis=1) / np.maximum(m, 1)
        ss = (np.where(finite, z - mean[:, None], 0.0) ** 2).sum(axis=1)
        return np.where(m > 1, np.sqrt(ss / np.maximum(m - 1, 1)), np.nan)


def _summarise(key, y, mc, mirrors, res, sl) -> None:
    """Sort one output's draws; write its order statistics, sd, and those of its mirrors."""
    with np.errstate(all="ignore"):
        res[key]["_mc_u"][sl] = _sd(y)
        finite = np.isfinite(y)
        m = finite.sum(axis=1)
        ys = np.where(finite, y, np.inf)
        ys.sort(axis=1)  # non-finite draws last
        _order_stats(ys, m, res[key], sl)
        for mkey, (src, fn) in mirrors.items():
            if src == key and mkey in res:
                # fn decreasing: fn of the reversed sorted draws ascends; the source's
                # non-finite draws (sorted last) come first there, so shift them out
                mirrored = fn(ys[:, ::-1])
                idx = np.minimum(np.arange(mc)[None, :] + (mc - m)[:, None], mc - 1)
                _order_stats(np.take_along_axis(mirrored, idx, axis=1), m, res[mkey], sl)


def _order_stats(ys: np.ndarray, m: np.ndarray, target: dict[str, np.ndarray], sl: slice) -> None:
    """Median and 68%/95% intervals from rows sorted ascending whose first m entries are the draws."""
    ok = m > 1
    mm = np.maximum(m, 2)
    picks = {}
    for p, lo_s, hi_s in ((0.95, "_mc_lo95", "_mc_hi95"), (0.68, "_mc_lo68", "_mc_hi68")):
        r, t = coverage_ranks(mm, p)
        picks[lo_s], picks[hi_s] = r - 1, t - 1
    rows = np.arange(ys.shape[0])
    for sfx, idx in picks.items():
        target[sfx][sl] = np.where(ok, ys[rows, idx], np.nan)
    a, b = (mm + 1) // 2 - 1, mm // 2  # 0-based middle ranks (equal when m is odd)
    target["_mc_median"][sl] = np.where(ok, 0.5 * (ys[rows, a].astype(float) + ys[rows, b]), np.nan)


# ------------------------------------------------------------------------- ratios

_TOKEN = re.compile(r"\s*(?:(?P<num>\d+(?:\.\d*)?(?:[eE][+-]?\d+)?|\.\d+(?:[eE][+-]?\d+)?)|(?P<name>[A-Za-z_][A-Za-z0-9_]*)|(?P<op>[*/^()+-]))")


@dataclass(frozen=True)
class Ratio:
    """A user quantity y = constant · Π key^exponent, parsed from an expression."""

    name: str
    expression: str
    constant: float
    exponents: tuple[tuple[str, float], ...]

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "expression": self.expression, "constant": self.constant,
                "exponents": {k: p for k, p in self.exponents}}


class _Parser:
    """expr := term (('*' | '/') term)* ; term := atom ['^' exponent] ;
    atom := NAME | NUMBER | '(' expr ')' ; exponent := ['-'] NUMBER | '(' ['-'] NUMBER ['/' NUMBER] ')'."""

    def __init__(self, text: str):
        self.tokens: list[tuple[str, str]] = []
        pos = 0
        text = text.rstrip()
        while pos < len(text):
            m = _TOKEN.match(text, pos)
            if not m or m.end() == pos:
                raise ValueError(f"unexpected character {text[pos:].lstrip()[:1]!r} at position {pos + 1}")
            kind = m.lastgroup
            self.tokens.append((kind, m.group(kind)))
            pos = m.end()
        self.i = 0

    def peek(self) -> tuple[str, str] | None:
        return self.tokens[self.i] if self.i < len(self.tokens) else None

    def take(self, value: str | None = None, kind: str | None = None) -> str:
        tok = self.peek()
        if tok is None or (value is not None and tok[1] != value) or (kind is not None and tok[0] != kind):
            want = repr(value) if value else (kind or "more")
            got = "the end" if tok is None else repr(tok[1])
            raise ValueError(f"expected {want} but found {got}")
        self.i += 1
        return tok[1]

    def parse(self) -> tuple[float, dict[str, float]]:
        if not self.tokens:
            raise ValueError("the expression is empty")
        c, e = self.expr()
        if self.peek() is not None:
            raise ValueError(f"unexpected {self.peek()[1]!r} after a complete expression")
        return c, e

    def expr(self) -> tuple[float, dict[str, float]]:
        c, e = self.term()
        while self.peek() and self.peek()[1] in "*/":
            op = self.take()
            c2, e2 = self.term()
            sign = 1.0 if op == "*" else -1.0
            c = c * c2 if op == "*" else c / c2
            for k, p in e2.items():
                e[k] = e.get(k, 0.0) + sign * p
        return c, e

    def term(self) -> tuple[float, dict[str, float]]:
        c, e = self.atom()
        if self.peek() and self.peek()[1] == "^":
            self.take("^")
            p = self.exponent()
            if self.peek() and self.peek()[1] == "^":
                raise ValueError("write a^(p*q) instead of a chained power a^p^q")
            c = c**p
            e = {k: v * p for k, v in e.items()}
        return c, e

    def atom(self) -> tuple[float, dict[str, float]]:
        tok = self.peek()
        if tok is None:
            raise ValueError("the expression ends too early")
        if tok[0] == "name":
            self.take()
            return 1.0, {tok[1]: 1.0}
        if tok[0] == "num":
            self.take()
            v = float(tok[1])
            if v <= 0:
                raise ValueError("a constant factor must be positive")
            return v, {}
        if tok[1] == "(":
            self.take("(")
            out = self.expr()
            self.take(")")
            return out
        raise ValueError(f"unexpected {tok[1]!r}")

    def exponent(self) -> float:
        paren = self.peek() is not None and self.peek()[1] == "("
        if paren:
            self.take("(")
        sign = 1.0
        if self.peek() and self.peek()[1] in "+-":
            sign = -1.0 if self.take() == "-" else 1.0
        p = float(self.take(kind="num"))
        if paren:
            if self.peek() and self.peek()[1] == "/":
                self.take("/")
                q = float(self.take(kind="num"))
                if q == 0:
                    raise ValueError("division by zero in an exponent")
                p = p / q
            self.take(")")
        return sign * p


def parse_ratio(name: str, expression: str) -> Ratio:
    """Parse a user ratio such as ``"fiber_length / fiber_radius"``.

    Grammar: products (``*``), quotients (``/``), powers (``^`` with a number,
    ``^2``, ``^-1``, ``^(1/2)``), parentheses, quantity keys and positive number
    constants. Nothing is evaluated as code.

    Raises
    ------
    ValueError
        Naming the problem and where it is.
    """
    if not isinstance(expression, str):
        raise ValueError("the expression must be a string")
    if len(expression) > 300:
        raise ValueError("the expression is longer than 300 characters")
    c, e = _Parser(expression).parse()
    e = {k: p for k, p in e.items() if p != 0.0}
    return Ratio(name, expression, float(c), tuple(e.items()))


#: Decimal exponent beyond which a ratio value over- or underflows a double (1.8e308, 2.2e-308).
DOUBLE_DECADES = 307.0
#: Decades assumed for a quantity without a plausible range when bounding a ratio (SI units).
_NO_RANGE_DECADES = (-30.0, 30.0)


def _decades(catalog, key: str) -> tuple[float, float]:
    """log10 of the plausible range of *key* in SI base units (wide when unknown)."""
    from comparo.units import parse_unit

    if key not in catalog or catalog[key].range is None:
        return _NO_RANGE_DECADES
    q = catalog[key]
    lo, hi = q.range
    if not (lo > 0 and hi > 0):
        return _NO_RANGE_DECADES
    to_si = float(parse_unit(q.unit).to_base_units().magnitude)
    return math.log10(lo * to_si), math.log10(hi * to_si)


def ratio_overflow(ratio: Ratio, catalog) -> str:
    """Why *ratio* can leave the range of a double (1e-307..1e307, SI) over the plausible
    ranges of its quantities, or ``""`` when it cannot."""
    if not (math.isfinite(ratio.constant) and ratio.constant > 0):
        return f"the constant of ratio {ratio.name!r} is beyond a double"
    lo = hi = math.log10(ratio.constant)
    for k, p in ratio.exponents:
        a, b = (p * d for d in _decades(catalog, k))
        lo, hi = lo + min(a, b), hi + max(a, b)
    if hi <= DOUBLE_DECADES and lo >= -DOUBLE_DECADES:
        return ""
    return (f"ratio {ratio.name!r} would span 1e{lo:.0f} to 1e{hi:.0f} (SI) over the plausible ranges of its "
            "quantities, beyond what a double holds (1e-307 to 1e307)")


# ------------------------------------------------------------------------ settings

_OPTIONAL_SETTINGS = {"fallback_temperature_c"}
_CHOICES = {
    "permeability_model": tuple(PERMEABILITY_MODELS),
    "effective_radius": ("volume_to_surface", "area_equivalent"),
    "modulus_fallback": ("elastic_modulus", "constrained", "none"),
    "frequency_bound": FREQUENCY_BOUNDS,
    "unknown_uncertainty": ("unknown", "ignore"),
}


def _settings(given: Mapping[str, Any] | None) -> tuple[dict[str, Any], dict[str, Any], dict[str, Any]]:
    """Defaults of schema/derived.toml overridden by *given*; returns (settings, ratios, quantities)."""
    from comparo.catalog import read_schema

    defaults = dict(read_schema("derived.toml")["settings"])
    given = dict(given or {})
    ratios = given.pop("ratios", {}) or {}
    quantities = given.pop("quantities", {}) or {}
    probs: list[Problem] = []

    def bad(key: str, value: Any, msg: str, hint: str = "") -> None:
        probs.append(Problem("error", "comparo.toml", None, f"derive.{key}", None if value is None else str(value),
                             "derive-setting", msg, hint))

    out = dict(defaults)
    for key, value in given.items():
        if key not in defaults and key not in _OPTIONAL_SETTINGS:
            bad(key, value, f"unknown derive setting {key!r}", f"known settings: {', '.join(sorted(set(defaults) | _OPTIONAL_SETTINGS))}")
            continue
        if key in _CHOICES:
            if value not in _CHOICES[key]:
                bad(key, value, f"{key} must be one of {', '.join(_CHOICES[key])}")
                continue
        elif key == "length":
            if not isinstance(value, str) or not value:
                bad(key, value, "length must name a length quantity, e.g. 'fiber_radius'")
                continue
        elif key == "thin_per_thick":
            if isinstance(value, str):
                pass  # a column of the table holding the number per taxon
            elif not isinstance(value, int | float) or isinstance(value, bool) or value < 0:
                bad(key, value, "thin_per_thick must be a number (2 or 3) or the name of a taxa column")
                continue
        else:
            if not isinstance(value, int | float) or isinstance(value, bool) or not math.isfinite(value):
                bad(key, value, f"{key} must be a number")
                continue
            allow_zero = key.endswith("_u_nm") or key.endswith("_u") or key == "fallback_temperature_c"
            if key == "poisson_ratio":
                if not -1.0 < value < 0.5:
                    bad(key, value, "poisson_ratio must lie in (-1, 0.5)")
                    continue
            elif key != "fallback_temperature_c" and (value < 0 or (value == 0 and not allow_zero)):
                bad(key, value, f"{key} must be positive")
                continue
        out[key] = value
    if not isinstance(ratios, Mapping):
        bad("ratios", ratios, "[ratios] must be a table of name = \"expression\"")
        ratios = {}
    if probs:
        raise InputError(probs)
    return out, dict(ratios), dict(quantities)


# ---------------------------------------------------------------------- derive()

_TABLE_LEAVES = {  # leaf -> (quantity key, SI unit); "length" is set from the settings
    "lattice_spacing_d10": "m",
    "permeability": "m**2",
    "transverse_modulus": "Pa",
    "elastic_modulus": "Pa",
    "fluid_viscosity": "Pa*s",
    "attach_rate": "1/s",
    "detach_rate": "1/s",
    "kinetic_time": "s",
    "frequency_observed": "Hz",
}
_SI = {  # derived key -> SI unit of the internal computation
    "filament_spacing": "m", "filament_volume_fraction": "dimensionless", "permeability_est": "m**2",
    "fluid_viscosity_est": "Pa*s", "drained_modulus": "Pa", "poroelastic_diffusivity": "m**2/s",
    "poroelastic_time": "s", "kinetic_time": "s", "poro_kinetic_ratio": "dimensionless",
    "frequency_kinetic_bound": "Hz", "frequency_hydraulic_bound": "Hz", "frequency_ratio": "dimensionless",
}


def _column(table: pd.DataFrame, name: str, factor: float = 1.0) -> np.ndarray:
    if name not in table.columns:
        return np.full(len(table), np.nan)
    import pandas as pd

    return pd.to_numeric(table[name], errors="coerce").to_numpy(dtype=float) * factor


def _text_column(table: pd.DataFrame, name: str) -> list[str]:
    if name not in table.columns:
        return [""] * len(table)
    return ["" if (v is None or (isinstance(v, float) and math.isnan(v))) else str(v) for v in table[name].tolist()]


def _join(*reasons: np.ndarray) -> np.ndarray:
    out = np.full(len(reasons[0]), "", dtype=object)
    for r in reasons:
        out = np.where(r == "", out, np.where(out == "", r, out + "; " + r))
    return out


def _weakest(bases: list[str]) -> str:
    rank = {b: i for i, b in enumerate(BASIS_ORDER)}
    return max(bases, key=lambda b: rank.get(b, len(BASIS_ORDER) - 1)) if bases else ""


def _fmt(x: float) -> str:
    return f"{x:.4g}"


def derive(table: pd.DataFrame, settings: Mapping[str, Any] | None = None, *, mc: int = 0,
           seed: int = 20240601, progress: bool = False) -> pd.DataFrame:
    """Add derived time scales, ratios, their uncertainty and lineage to a per-taxon table.

    Parameters
    ----------
    table : pandas.DataFrame
        One row per taxon: ``taxon``, grouping columns, ``temperature_c`` (°C) and per
        catalogue quantity Q the columns Q (canonical unit), Q_u, Q_n, Q_basis, Q_obs.
        Absent quantities may have no columns. Not modified.
    settings : mapping, optional
        The ``[derive]`` settings of comparo.toml (defaults in schema/derived.toml),
        optionally with ``ratios`` (name -> expression, or a table with
        ``expression`` and ``unit``) and ``quantities`` (a dataset's own catalogue
        entries, for the units of ratio operands and of the length setting).
    mc : int
        Monte Carlo draws per taxon (0: first-order uncertainty only). Refused above a
        cap computed from this machine's memory and a 600 s time budget
        (:func:`comparo.bounds.check_mc`; the message states the cap and how).
    seed : int
        Seed of ``numpy.random.default_rng``.
    progress : bool
        Show a progress bar on standard error for a long Monte Carlo run.

    Returns
    -------
    pandas.DataFrame
        A copy of *table* with, per derived key D (schema/derived.toml) and user
        ratio, the columns D (unit of derived.toml), D_u (GUM standard uncertainty),
        D_basis, D_obs, D_method, D_missing, and with ``mc > 0`` also D_mc_median,
        D_mc_lo68, D_mc_hi68, D_mc_lo95, D_mc_hi95, D_mc_u (MC standard deviation)
        and D_nonlinear (GUM and MC standard uncertainties differ by more than 20%).
        ``regime`` is text ('kinetic' or 'hydraulic') with basis, obs, method and
        missing columns only. ``attrs['units']`` maps each added key to its unit.

    Raises
    ------
    InputError
        For a bad setting or ratio expression (naming the setting).

    Notes
    -----
    Uncertainty: first order (JCGM 100:2008) on the log scale with all inputs
    independent; Monte Carlo (JCGM 101:2008) with lognormal inputs (mean = value,
    sd = standard uncertainty), all taxa at once. Equations: docs/methods/derived.md.

    References
    ----------
    JCGM 100:2008 Evaluation of measurement data — Guide to the expression of
    uncertainty in measurement. JCGM 101:2008 Supplement 1 to the GUM — Propagation
    of distributions using a Monte Carlo method.
    """
    from comparo.bounds import check_mc
    from comparo.catalog import load_catalog, read_schema
    from comparo.units import conversion_factor

    if isinstance(mc, np.integer):
        mc = int(mc)
    mc = check_mc(mc, len(table), option="mc")
    s, ratio_settings, user_quantities = _settings(settings)
    catalog = load_catalog(user_quantities)
    keys = read_schema("derived.toml")["keys"]
    n = len(table)
    rng = np.random.default_rng(seed)
    ignore_unknown = s["unknown_uncertainty"] == "ignore"

    length_key = s["length"]
    if length_key not in catalog or catalog.target(length_key).kind != "length":
        raise InputError([Problem("error", "comparo.toml", None, "derive.length", str(length_key), "derive-setting",
                                  f"length {length_key!r} is not a length quantity of the catalogue",
                                  "use a key such as 'fiber_radius'")])

    # ---- leaves in SI units, relative uncertainty, basis, obs, why missing
    leaves: dict[str, np.ndarray] = {}
    rel_u: dict[str, np.ndarray] = {}
    basis: dict[str, list[str]] = {}
    obs: dict[str, list[str]] = {}
    absent: dict[str, np.ndarray] = {}
    names = {leaf: leaf for leaf in _TABLE_LEAVES} | {"length": length_key}
    for leaf, si in {**_TABLE_LEAVES, "length": "m"}.items():
        key = names[leaf]
        f = conversion_factor(catalog[key].unit, si)
        x = _column(table, key, f)
        u = _column(table, f"{key}_u", f)
        ok = np.isfinite(x) & (x > 0)
        absent[leaf] = np.where(np.isnan(x), f"no {key}", np.where(ok, "", f"{key} not positive")).astype(object)
        x = np.where(ok, x, np.nan)
        with np.errstate(divide="ignore", invalid="ignore"):
            rel_u[leaf] = np.where(np.isfinite(u) & (u >= 0), u / x, np.nan)
        leaves[leaf] = x
        basis[leaf] = _text_column(table, f"{key}_basis")
        obs[leaf] = _text_column(table, f"{key}_obs")

    tpt = s["thin_per_thick"]
    if isinstance(tpt, str):
        if tpt not in table.columns:
            raise InputError([Problem("error", "comparo.toml", None, "derive.thin_per_thick", tpt, "derive-setting",
                                      f"thin_per_thick names column {tpt!r}, which the table does not have")])
        thin_per_thick = _column(table, tpt)
    else:
        thin_per_thick = np.full(n, float(tpt))
    temperature = _column(table, "temperature_c")
    if "fallback_temperature_c" in s:
        temperature = np.where(np.isnan(temperature), float(s["fallback_temperature_c"]), temperature)
    nm = conversion_factor("nm", "m")
    fixed = {  # leaf -> (value, standard uncertainty), all "assumed"
        "thick_filament_radius": (s["thick_filament_radius_nm"] * nm, s["thick_filament_radius_u_nm"] * nm),
        "thin_filament_radius": (s["thin_filament_radius_nm"] * nm, s["thin_filament_radius_u_nm"] * nm),
        "thin_per_thick": (thin_per_thick, 0.0),
        "cytosol_viscosity_factor": (s["cytosol_viscosity_factor"], s["cytosol_viscosity_factor_u"]),
        "water_viscosity": (water_viscosity_at(temperature), None),
        "modulus_fallback": (1.0, 0.0),  # a factor 1 on the fallback modulus: puts "assumed" in its lineage
    }
    for leaf, (x, u) in fixed.items():
        leaves[leaf] = np.broadcast_to(np.asarray(x, dtype=float), (n,)).copy()
        with np.errstate(divide="ignore", invalid="ignore"):
            rel_u[leaf] = np.full(n, float(s["water_viscosity_rel_u"])) if u is None else np.asarray(u) / leaves[leaf]
        rel_u[leaf] = np.where(np.isfinite(rel_u[leaf]), rel_u[leaf], 0.0)
        basis[leaf] = ["assumed"] * n
        obs[leaf] = [""] * n
    lo, hi = WATER_RANGE_C
    t_reason = np.where(np.isnan(temperature), "no temperature_c for water viscosity",
                        np.where(np.isnan(leaves["water_viscosity"]),
                                 f"temperature_c outside {lo:g}-{hi:g} C (liquid water at 0.1 MPa)", "")).astype(object)

    model = s["permeability_model"]
    spec = PERMEABILITY_MODELS[model]
    fallback = s["modulus_fallback"]
    nu = float(s["poisson_ratio"])
    rule = s["frequency_bound"]
    mode = float(s["hydraulic_mode_factor"])

    def compute(L: dict[str, Any]) -> dict[str, Any]:
        d10, rm, ra, na = L["lattice_spacing_d10"], L["thick_filament_radius"], L["thin_filament_radius"], L["thin_per_thick"]
        phi = filament_volume_fraction(d10, rm, ra, na)
        k_est = permeability(effective_radius(rm, ra, na, s["effective_radius"]), phi, model, s["kozeny_constant"])
        eta_est = L["water_viscosity"] * L["cytosol_viscosity_factor"]
        eta = np.where(np.isnan(L["fluid_viscosity"]), eta_est, L["fluid_viscosity"])
        k = np.where(np.isnan(L["permeability"]), k_est, L["permeability"])
        e = L["elastic_modulus"]
        if fallback == "elastic_modulus":
            m_fb = e * L["modulus_fallback"]
        elif fallback == "constrained":
            m_fb = constrained_modulus(e, nu) * L["modulus_fallback"]
        else:
            m_fb = np.full(np.shape(e), np.nan)
        m = np.where(np.isnan(L["transverse_modulus"]), m_fb, L["transverse_modulus"])
        tau_p = poroelastic_time(L["length"], k, m, eta)
        tau_x = np.where(np.isnan(L["kinetic_time"]), kinetic_time_two_state(L["attach_rate"], L["detach_rate"]),
                         L["kinetic_time"])
        f_kin = frequency_bound(tau_x, rule)
        f_hyd = frequency_bound(tau_p, rule, mode)
        return {
            "filament_spacing": filament_spacing(d10),
            "filament_volume_fraction": phi,
            "permeability_est": k_est,
            "fluid_viscosity_est": eta_est,
            "drained_modulus": m,
            "poroelastic_diffusivity": poroelastic_diffusivity(k, m, eta),
            "poroelastic_time": tau_p,
            "kinetic_time": tau_x,
            "poro_kinetic_ratio": tau_p / tau_x,
            "frequency_kinetic_bound": f_kin,
            "frequency_hydraulic_bound": f_hyd,
            "frequency_ratio": L["frequency_observed"] / np.minimum(f_kin, f_hyd),
            "_regime_score": f_hyd / f_kin,
        }

    mirrors = {"frequency_kinetic_bound": ("kinetic_time", lambda t: frequency_bound(t, rule)),
               "frequency_hydraulic_bound": ("poroelastic_time", lambda t: frequency_bound(t, rule, mode))}
    prop = _propagate(compute, leaves, rel_u, ignore_unknown, mc, rng, list(_SI), mirrors, progress=progress)
    vals = prop.values

    # ---- why values are missing
    phi_out = np.array([
        f"filament_volume_fraction {_fmt(p)} outside ({spec.phi_min:g}, {spec.phi_max:.4g}] of {model}"
        if np.isfinite(p) and not (spec.phi_min < p <= spec.phi_max) else "" for p in vals["filament_volume_fraction"]],
        dtype=object)
    r_d10 = absent["lattice_spacing_d10"]
    r_kest = _join(r_d10, phi_out)
    r_k = np.where((absent["permeability"] == "") | (r_kest == ""), "", "no permeability, and permeability_est: " + r_kest)
    r_eta = np.where((absent["fluid_viscosity"] == "") | (t_reason == ""), "", "no fluid_viscosity, and " + t_reason)
    if fallback == "none":
        r_m = np.where(absent["transverse_modulus"] == "", "", "no transverse_modulus (modulus_fallback = none)")
    else:
        r_m = np.where((absent["transverse_modulus"] == "") | (absent["elastic_modulus"] == ""), "",
                       "no transverse_modulus or elastic_modulus")
    r_d = _join(r_k, r_m, r_eta)
    r_tp = _join(absent["length"], r_d)
    rates = _join(absent["attach_rate"], absent["detach_rate"])
    r_tx = np.where((absent["kinetic_time"] == "") | (rates == ""), "", absent["kinetic_time"] + ", and 1/(f+g): " + rates)
    reasons = {
        "filament_spacing": r_d10, "filament_volume_fraction": r_d10, "permeability_est": r_kest,
        "fluid_viscosity_est": t_reason, "drained_modulus": r_m, "poroelastic_diffusivity": r_d,
        "poroelastic_time": r_tp, "kinetic_time": r_tx, "poro_kinetic_ratio": _join(r_tp, r_tx),
        "frequency_kinetic_bound": r_tx, "frequency_hydraulic_bound": r_tp,
        "frequency_ratio": _join(absent["frequency_observed"], r_tx, r_tp),
        "regime": _join(r_tx, r_tp),
    }

    # ---- routes
    k_route = np.where(~np.isnan(leaves["permeability"]), "k = permeability", f"k = permeability_est ({model})")
    m_fb_text = {"elastic_modulus": "M = elastic_modulus", "constrained": f"M = constrained from elastic_modulus (nu {nu:g})",
                 "none": ""}[fallback]
    m_route = np.where(~np.isnan(leaves["transverse_modulus"]), "M = transverse_modulus", m_fb_text)
    f_cyto = s["cytosol_viscosity_factor"]
    eta_route = np.where(~np.isnan(leaves["fluid_viscosity"]), "eta = fluid_viscosity",
                         f"eta = fluid_viscosity_est (water x {f_cyto:g})")
    d_route = np.char.add(np.char.add(np.char.add(np.char.add(k_route, "; "), m_route), "; "), eta_route)
    bound_txt = "1/(2 pi tau)" if rule == "corner" else "1/tau"
    methods = {
        "filament_spacing": "hexagonal lattice d = 2 d10/sqrt(3)",
        "filament_volume_fraction": [f"hexagonal lattice, r_thick {s['thick_filament_radius_nm']:g} nm, "
                                     f"r_thin {s['thin_filament_radius_nm']:g} nm, {_fmt(t)} thin per thick" for t in thin_per_thick],
        "permeability_est": f"{model}, a = {s['effective_radius']} radius",
        "fluid_viscosity_est": [f"IAPWS R12-08 water at {_fmt(t)} C and 0.1 MPa, x {f_cyto:g}" for t in temperature],
        "drained_modulus": m_route,
        "poroelastic_diffusivity": d_route,
        "poroelastic_time": np.char.add(f"l = {length_key}; ", d_route),
        "kinetic_time": np.where(~np.isnan(leaves["kinetic_time"]), "reported", "two-state 1/(f+g)"),
        "poro_kinetic_ratio": "poroelastic_time / kinetic_time",
        "frequency_kinetic_bound": f"{bound_txt}, tau = kinetic_time",
        "frequency_hydraulic_bound": (f"{mode:g} x " if mode != 1 else "") + f"{bound_txt}, tau = poroelastic_time",
        "frequency_ratio": np.where(vals["_regime_score"] < 1, "frequency_observed / frequency_hydraulic_bound",
                                    "frequency_observed / frequency_kinetic_bound"),
        "regime": "the smaller frequency bound limits",
    }

    # ---- assemble
    display = {leaf: names.get(leaf, leaf) for leaf in leaves}
    new: dict[str, Any] = {}
    units: dict[str, str] = {}
    lineage_cache: dict[str, Any] = {}
    for key in _SI:
        unit = keys[key]["unit"]
        units[key] = unit
        f = conversion_factor(_SI[key], unit)
        y = vals[key]
        u = prop.u[key]
        if key == "kinetic_time":  # a reported kinetic time passes through with its own uncertainty
            rep = ~np.isnan(leaves["kinetic_time"])
            u = np.where(rep, leaves["kinetic_time"] * rel_u["kinetic_time"], u)
        through = {"kinetic_time": "kinetic_time", "drained_modulus": "transverse_modulus"}.get(key)
        cols = _lineage_columns(key, y, prop, basis, obs, display, reasons[key], methods[key], cache=lineage_cache,
                                passthrough=(through, leaves[through], basis[through]) if through else None)
        cols = {key: y * f, f"{key}_u": u * f, **cols}
        if mc > 0:
            cols.update(_mc_columns(key, prop.mc[key], cols[f"{key}_u"], f))
        new.update(cols)
    score = vals["_regime_score"]
    regime = np.where(score < 1.0, "hydraulic", "kinetic").astype(object)
    regime[~np.isfinite(score)] = None
    reg = _lineage_columns("_regime_score", score, prop, basis, obs, display, reasons["regime"], methods["regime"],
                           cache=lineage_cache)
    new["regime"] = regime
    new.update({c.replace("_regime_score", "regime"): v for c, v in reg.items()})
    units["regime"] = "dimensionless"

    out = table.drop(columns=[c for c in new if c in table.columns])
    out = pd_concat(out, new)
    if ratio_settings:
        ratio_cols, ratio_units = _ratios(out, ratio_settings, catalog, keys, mc, rng, ignore_unknown)
        out = pd_concat(out, ratio_cols)
        units.update(ratio_units)
    out.attrs = {**table.attrs, "units": {**table.attrs.get("units", {}), **units}}
    return out


def pd_concat(frame: pd.DataFrame, columns: Mapping[str, Any]) -> pd.DataFrame:
    """*frame* with *columns* appended (one concat, no fragmentation)."""
    import pandas as pd

    extra = pd.DataFrame(dict(columns), index=frame.index)
    return pd.concat([frame, extra], axis=1)


def _lineage_columns(key: str, y: np.ndarray, prop: _Propagation, basis, obs, display, reason, method,
                     passthrough=None, cache: dict | None = None) -> dict[str, Any]:
    """KEY_basis, KEY_obs, KEY_method and KEY_missing of one output.

    *cache* (one dict per derive() call) keeps each leaf's basis ranks and obs_id
    tokens, which every output reuses.
    """
    n = len(y)
    has = np.isfinite(y)
    reason = np.where(has, "", np.where(reason == "", "not computable from the inputs", reason))
    reason = reason.astype(object)
    for i in np.flatnonzero(has):
        lacking = prop.unknown_u[key][i]
        if lacking:
            reason[i] = "uncertainty: no " + ", ".join(f"{display[lf]}_u" for lf in lacking)
    cache = {} if cache is None else cache
    deps = prop.deps[key]
    names = list(deps)
    rank = {b: i for i, b in enumerate(BASIS_ORDER)}
    for lf in names:
        if lf not in cache:
            cache[lf] = ([rank.get(b or "assumed", -1) for b in basis[lf]],
                         [tuple(t.strip() for t in o.split(";") if t.strip()) for o in obs[lf]])
    ranks = np.array([cache[lf][0] for lf in names], dtype=np.int64).reshape(len(names), n)
    dep = np.array([deps[lf] for lf in names], dtype=bool).reshape(len(names), n)
    if (ranks[dep] < 0).any():  # a basis outside BASIS_ORDER: fall back to the row-wise rule
        weakest = [_weakest([basis[lf][i] or "assumed" for lf in names if deps[lf][i]] + ["computed"]) for i in range(n)]
    else:
        top = np.max(np.where(dep, ranks, rank["computed"]), axis=0, initial=rank["computed"])
        weakest = [BASIS_ORDER[t] for t in top]
    b_col, o_col = [""] * n, [""] * n
    for i in np.flatnonzero(has):
        if passthrough is not None and not np.isnan(passthrough[1][i]):
            b_col[i] = passthrough[2][i] or "assumed"
            used = [passthrough[0]]  # a leaf too, so in the cache
        else:
            b_col[i] = weakest[i]
            used = [names[j] for j in np.flatnonzero(dep[:, i])]
        o_col[i] = ";".join(dict.fromkeys(t for lf in used for t in cache[lf][1][i]))
    method = np.broadcast_to(np.asarray(method, dtype=object), (n,))
    return {f"{key}_basis": b_col, f"{key}_obs": o_col, f"{key}_method": np.where(has, method, ""),
            f"{key}_missing": reason}


def _mc_columns(key: str, summ: dict[str, np.ndarray], gum_u: np.ndarray, factor: float) -> dict[str, Any]:
    cols = {f"{key}{sfx}": summ[sfx] * factor for sfx in (*_MC_SUFFIXES, "_mc_u")}
    mcu = cols[f"{key}_mc_u"]
    with np.errstate(divide="ignore", invalid="ignore"):
        cols[f"{key}_nonlinear"] = np.where(np.isfinite(gum_u) & np.isfinite(mcu) & (gum_u > 0),
                                            np.abs(mcu / gum_u - 1.0) > 0.2, False)
    return cols


_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")


def _ratios(out: pd.DataFrame, ratio_settings: Mapping[str, Any], catalog, keys, mc: int,
            rng: np.random.Generator, ignore_unknown: bool) -> tuple[dict[str, Any], dict[str, str]]:
    """Columns of the user ratios of ``[ratios]`` (GUM and Monte Carlo as for derived keys)."""
    from comparo.units import conversion_factor, parse_unit

    probs: list[Problem] = []
    parsed: list[tuple[Ratio, dict[str, str], float, str]] = []
    for name, spec in ratio_settings.items():
        expr, unit = (spec.get("expression"), spec.get("unit")) if isinstance(spec, Mapping) else (spec, None)

        def bad(msg: str, hint: str = "", _name=name, _expr=expr) -> None:
            probs.append(Problem("error", "comparo.toml", None, f"ratios.{_name}", None if _expr is None else str(_expr),
                                 "ratio-expression", msg, hint))

        if not _NAME.fullmatch(str(name)):
            bad(f"ratio name {name!r} must be letters, digits and underscores")
            continue
        if name in out.columns or name in keys or name in catalog:
            bad(f"ratio name {name!r} is already a quantity or column", "choose another name")
            continue
        try:
            ratio = parse_ratio(name, expr)
        except ValueError as exc:
            bad(f"cannot read the expression of ratio {name!r}: {exc}",
                "use quantity keys with *, /, ^number and parentheses, e.g. fiber_length / fiber_radius")
            continue
        op_units: dict[str, str] = {}
        for k, _p in ratio.exponents:
            if k in keys and k != "regime":
                op_units[k] = keys[k]["unit"]
            elif k in catalog:
                op_units[k] = catalog.target(k).unit
            else:
                bad(f"ratio {name!r} uses {k!r}, which is neither a catalogue nor a derived quantity")
        if not ratio.exponents:
            bad(f"ratio {name!r} has no quantity in it")
        if len(op_units) != len(ratio.exponents):
            continue
        span = ratio_overflow(ratio, catalog)
        if span:
            bad(span, "use smaller powers")
            continue
        q = parse_unit("dimensionless")
        for k, p in ratio.exponents:
            q = q * parse_unit(op_units[k]) ** p
        base = q.to_base_units()
        if unit is None:
            unit_out = "dimensionless" if base.dimensionless else str(base.units)
        else:
            try:
                if parse_unit(str(unit)).dimensionality != base.dimensionality:
                    bad(f"ratio {name!r} has dimension {base.dimensionality} but unit {unit!r} has "
                        f"{parse_unit(str(unit)).dimensionality}")
                    continue
            except ValueError as exc:
                bad(f"ratio {name!r}: {exc}")
                continue
            unit_out = str(unit)
        factor = float(base.magnitude) * conversion_factor("dimensionless" if base.dimensionless else str(base.units), unit_out)
        parsed.append((ratio, op_units, factor, unit_out))
    if probs:
        raise InputError(probs)

    cols: dict[str, Any] = {}
    units: dict[str, str] = {}
    for ratio, _op_units, factor, unit_out in parsed:
        leaves, rel_u, basis, obs, reasons = {}, {}, {}, {}, []
        for k, _p in ratio.exponents:
            x = _column(out, k)
            ok = np.isfinite(x) & (x > 0)
            reasons.append(np.where(np.isnan(x), f"no {k}", np.where(ok, "", f"{k} not positive")).astype(object))
            x = np.where(ok, x, np.nan)
            u = _column(out, f"{k}_u")
            with np.errstate(divide="ignore", invalid="ignore"):
                rel_u[k] = np.where(np.isfinite(u) & (u >= 0), u / x, np.nan)
            leaves[k] = x
            basis[k] = _text_column(out, f"{k}_basis")
            obs[k] = _text_column(out, f"{k}_obs")
        const = ratio.constant * factor

        def compute(L, _ratio=ratio, _const=const):
            y = _const
            for k, p in _ratio.exponents:
                y = y * L[k] ** p
            return {_ratio.name: y}

        prop = _propagate(compute, leaves, rel_u, ignore_unknown, mc, rng)
        name = ratio.name
        y = prop.values[name]
        cols[name] = y
        cols[f"{name}_u"] = prop.u[name]
        cols.update(_lineage_columns(name, y, prop, basis, obs, {k: k for k in leaves}, _join(*reasons),
                                     f"{ratio.expression} [{unit_out}]"))
        if mc > 0:
            cols.update(_mc_columns(name, prop.mc[name], prop.u[name], 1.0))
        units[name] = unit_out
    return cols, units
