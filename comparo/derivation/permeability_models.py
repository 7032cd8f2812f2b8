"""Permeability of a fibre array (m^2) from the fibre radius and the solid fraction: the
models of :data:`PERMEABILITY_MODELS` with their ranges of validity.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from comparo.derivation.lattice import HEXAGONAL_PACKING_LIMIT

#: Square of the first zero of the Bessel function J0, j01 = 2.404825557695773
#: (Abramowitz & Stegun 1964, Table 9.5): the slowest radial diffusion mode of a
#: cylinder drained at its surface decays as exp(-j01^2 * D * t / a^2).
J01_SQUARED = 2.404825557695773**2


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
        return {
            "name": self.name,
            "phi_min": self.phi_min,
            "phi_max": self.phi_max,
            "reference": self.reference,
        }


#: Permeability models by setting name; a fraction outside (phi_min, phi_max] gives no value.
PERMEABILITY_MODELS: dict[str, PermeabilityModel] = {
    m.name: m
    for m in (
        PermeabilityModel(
            "happel_parallel",
            _happel_parallel,
            0.0,
            HEXAGONAL_PACKING_LIMIT,
            "Happel J (1959) AIChE J 5:174-177, flow along the cylinders",
        ),
        PermeabilityModel(
            "happel_transverse",
            _happel_transverse,
            0.0,
            HEXAGONAL_PACKING_LIMIT,
            "Happel J (1959) AIChE J 5:174-177, flow across the cylinders",
        ),
        PermeabilityModel(
            "kuwabara_transverse",
            _kuwabara_transverse,
            0.0,
            HEXAGONAL_PACKING_LIMIT,
            "Kuwabara S (1959) J Phys Soc Jpn 14:527-532, flow across the cylinders",
        ),
        PermeabilityModel(
            "jackson_james",
            _jackson_james,
            0.0,
            0.3,
            "Jackson GW, James DF (1986) Can J Chem Eng 64:364-374, random 3-D fibres",
        ),
        PermeabilityModel(
            "kozeny_carman",
            None,
            0.0,
            HEXAGONAL_PACKING_LIMIT,  # type: ignore[arg-type]
            "Carman PC (1937) Trans IChemE 15:150-166",
        ),
        PermeabilityModel(
            "gebart_transverse",
            _gebart_transverse,
            0.0,
            HEXAGONAL_PACKING_LIMIT,
            "Gebart BR (1992) J Compos Mater 26:1100-1133, hexagonal packing, across",
        ),
        PermeabilityModel(
            "gebart_parallel",
            _gebart_parallel,
            0.0,
            HEXAGONAL_PACKING_LIMIT,
            "Gebart BR (1992) J Compos Mater 26:1100-1133, hexagonal packing, along",
        ),
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
        raise ValueError(
            f"unknown permeability model {model!r}; use one of {', '.join(PERMEABILITY_MODELS)}"
        ) from None
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
