"""Derived time scales and dimensionless ratios, with propagated uncertainty.

From the per-taxon table (one row per taxon, values in the catalogue's canonical
units) this package computes the myofilament lattice geometry, a lattice
permeability, the poroelastic diffusivity and time of the fiber, the cross-bridge
kinetic time, their ratio, the frequency bounds they imply and which process is
limiting. Every derived value gets a first-order (GUM) standard uncertainty, on
request Monte Carlo intervals, the weakest basis of its inputs and the obs_ids it
rests on. User ratios (``[ratios]`` in comparo.toml) are parsed by a small grammar
of our own (``*``, ``/``, ``^`` and parentheses over quantity keys), never by eval.

Internally every quantity is in SI base units; conversions to and from the
catalogue units go through :func:`comparo.base.units.conversion_factor`.

These are order-of-magnitude physical estimates, not measurements: see
docs/methods/derived.md.

Files: :mod:`.settings` (the ``[derive]`` settings), :mod:`.expressions` (the ratio
grammar), physical models in :mod:`.lattice`, :mod:`.permeability_models`, :mod:`.water` and
:mod:`.timescales`, :mod:`.uncertainty` (GUM and Monte Carlo), :mod:`.lineage` (basis,
obs_ids, methods, missing reasons), :mod:`.ratios` (user ratio columns) and
:mod:`.compute` (:func:`derive`, the whole table).
"""

from __future__ import annotations

from comparo.derivation.compute import derive
from comparo.derivation.expressions import DOUBLE_DECADES, Ratio, parse_ratio, ratio_overflow
from comparo.derivation.lattice import (
    HEXAGONAL_PACKING_LIMIT,
    effective_radius,
    filament_spacing,
    filament_volume_fraction,
    thick_thin_distance,
    unit_cell_area,
)
from comparo.derivation.lineage import BASIS_ORDER
from comparo.derivation.permeability_models import J01_SQUARED, PERMEABILITY_MODELS, permeability
from comparo.derivation.timescales import (
    constrained_modulus,
    frequency_bound,
    kinetic_time_two_state,
    poroelastic_diffusivity,
    poroelastic_time,
)
from comparo.derivation.uncertainty import gum_relative, sample_inputs
from comparo.derivation.water import water_density, water_viscosity, water_viscosity_at

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
    "ratio_overflow",
    "DOUBLE_DECADES",
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
