"""Density and viscosity of liquid water (IAPWS R12-08 viscosity on IF97 density), in SI units."""

from __future__ import annotations

import numpy as np

_TC, _RHOC, _MU_STAR = 647.096, 322.0, 1.0e-6  # K, kg/m3, Pa s (IAPWS R12-08)


_H0 = (1.67752, 2.20462, 0.6366564, -0.241605)


# H_ij of IAPWS R12-08 Table 2 (i = power of 1/T - 1, j = power of rho - 1); zeros omitted
_HIJ = (
    (0, 0, 5.20094e-1),
    (1, 0, 8.50895e-2),
    (2, 0, -1.08374),
    (3, 0, -2.89555e-1),
    (0, 1, 2.22531e-1),
    (1, 1, 9.99115e-1),
    (2, 1, 1.88797),
    (3, 1, 1.26613),
    (5, 1, 1.20573e-1),
    (0, 2, -2.81378e-1),
    (1, 2, -9.06851e-1),
    (2, 2, -7.72479e-1),
    (3, 2, -4.89837e-1),
    (4, 2, -2.57040e-1),
    (0, 3, 1.61913e-1),
    (1, 3, 2.57399e-1),
    (0, 4, -3.25372e-2),
    (3, 4, 6.98452e-2),
    (4, 5, 8.72102e-3),
    (3, 6, -4.35673e-3),
    (5, 6, -5.93264e-4),
)


# IAPWS-IF97 region 1 (Table 2 of the release): exponents I, J and coefficients n
_IF97_I = (
    0,
    0,
    0,
    0,
    0,
    0,
    0,
    0,
    1,
    1,
    1,
    1,
    1,
    1,
    2,
    2,
    2,
    2,
    2,
    3,
    3,
    3,
    4,
    4,
    4,
    5,
    8,
    8,
    21,
    23,
    29,
    30,
    31,
    32,
)


_IF97_J = (
    -2,
    -1,
    0,
    1,
    2,
    3,
    4,
    5,
    -9,
    -7,
    -1,
    0,
    1,
    3,
    -3,
    0,
    1,
    3,
    17,
    -4,
    0,
    6,
    -5,
    -2,
    10,
    -8,
    -11,
    -6,
    -29,
    -31,
    -38,
    -39,
    -40,
    -41,
)


_IF97_N = (
    0.14632971213167,
    -0.84548187169114,
    -0.37563603672040e1,
    0.33855169168385e1,
    -0.95791963387872,
    0.15772038513228,
    -0.16616417199501e-1,
    0.81214629983568e-3,
    0.28319080123804e-3,
    -0.60706301565874e-3,
    -0.18990068218419e-1,
    -0.32529748770505e-1,
    -0.21841717175414e-1,
    -0.52838357969930e-4,
    -0.47184321073267e-3,
    -0.30001780793026e-3,
    0.47661393906987e-4,
    -0.44141845330846e-5,
    -0.72694996297594e-15,
    -0.31679644845054e-4,
    -0.28270797985312e-5,
    -0.85205128120103e-9,
    -0.22425281908000e-5,
    -0.65171222895601e-6,
    -0.14341729937924e-12,
    -0.40516996860117e-6,
    -0.12734301741641e-8,
    -0.17424871230634e-9,
    -0.68762131295531e-18,
    0.14478307828521e-19,
    0.26335781662795e-22,
    -0.11947622640071e-22,
    0.18228094581404e-23,
    -0.93537087292458e-25,
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
