"""Myofilament lattice geometry: filament spacing, unit cell, filament volume fraction and the
effective radius of the filaments (hexagonal lattice). Lengths in metres.
"""

from __future__ import annotations

import math

#: Largest solid fraction of equal parallel cylinders (hexagonal packing), pi/(2*sqrt(3)).
HEXAGONAL_PACKING_LIMIT = math.pi / (2.0 * math.sqrt(3.0))


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
