"""The one unit registry of comparo, and the parsing of units as users type them.

Everything that converts a unit asks this module; no conversion factor is
written anywhere else. Parsing is cached per distinct unit string, so a
100,000-row table with a dozen distinct units costs a dozen parses.

The registry is pint's full default registry. Reading pint's definitions file
takes about 0.15 s per process, so the parsed definitions are kept in pint's own
disk cache (a folder per pint version under the user cache folder, or under
``COMPARO_CACHE_DIR``; ``COMPARO_CACHE_DIR=""`` turns the cache off). The cache
holds what pint parsed from its own file, so the conversions are the same;
when the folder cannot be written or read, the registry is built without it.
"""

from __future__ import annotations

import math
import os
import re
from functools import lru_cache
from pathlib import Path

import pint

# What kind of quantity a catalogue entry is -> the pint dimensionality it must have.
KIND_DIMENSIONS: dict[str, str] = {
    "length": "[length]",
    "area": "[length] ** 2",
    "volume": "[length] ** 3",
    "mass": "[mass]",
    "time": "[time]",
    "rate": "1 / [time]",
    "frequency": "1 / [time]",
    "stress": "[mass] / [length] / [time] ** 2",
    "viscosity": "[mass] / [length] / [time]",
    "diffusivity": "[length] ** 2 / [time]",
    "fraction": "",
    "ratio": "",
    "count": "",
    "temperature": "[temperature]",
    "energy": "[mass] * [length] ** 2 / [time] ** 2",
    "power": "[mass] * [length] ** 2 / [time] ** 3",
    "power_per_mass": "[length] ** 2 / [time] ** 3",
    "force": "[mass] * [length] / [time] ** 2",
    "energy_per_mol": "[mass] * [length] ** 2 / [time] ** 2 / [substance]",
}

# Units curators usually type, per kind (offered as choices in the entry workbook; any
# other unit pint reads is still accepted). Written as users type them.
USUAL_UNITS: dict[str, tuple[str, ...]] = {
    "length": ("nm", "µm", "mm", "cm", "m"),
    "area": ("nm²", "µm²", "m²"),
    "volume": ("µm³", "mm³", "mL"),
    "mass": ("µg", "mg", "g", "kg"),
    "time": ("µs", "ms", "s", "min"),
    "rate": ("1/s",),
    "frequency": ("Hz", "kHz"),
    "stress": ("Pa", "kPa", "MPa", "GPa"),
    "viscosity": ("mPa·s", "Pa·s", "cP"),
    "diffusivity": ("µm²/s", "mm²/s", "m²/s"),
    "fraction": ("1", "%"),
    "ratio": ("1",),
    "count": ("1",),
    "temperature": ("degC", "K"),
    "energy_per_mol": ("kJ/mol",),
}

_SUPERSCRIPTS = str.maketrans({"²": "**2", "³": "**3", "¹": "**1"})
_WORDS_DIMENSIONLESS = {"1", "-", "dimensionless", "fraction", "ratio", "unitless", "none", "count"}


class UnitParseError(ValueError):
    """A unit string pint cannot read."""


@lru_cache(maxsize=1)
def registry() -> pint.UnitRegistry:
    """The shared pint registry (created once).

    Adds nothing but a few spellings biologists use; ``micron``, ``µm``,
    ``um``, ``Hz``, ``kPa``, ``1/s`` and ``s^-1`` are pint's own.
    """
    ureg = None
    folder = cache_folder()
    if folder is not None:
        try:
            ureg = _cached_registry(folder)
        except Exception:  # an unwritable or damaged cache costs time, never a result
            _forget(folder)
            ureg = None
    if ureg is None:
        ureg = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
    ureg.define("fraction_unit = 1 = fraction")
    return ureg


_READY = "complete"


def cache_folder() -> Path | None:
    """Folder of the registry cache: ``$COMPARO_CACHE_DIR/pint-VERSION`` or the user
    cache folder's ``comparo/pint-VERSION``; ``None`` when ``COMPARO_CACHE_DIR`` is empty."""
    env = os.environ.get("COMPARO_CACHE_DIR")
    if env == "":
        return None
    if env is None:
        import platformdirs  # a dependency of pint

        base = platformdirs.user_cache_path(appname="comparo", appauthor=False)
    else:
        base = Path(env)
    return base / f"pint-{pint.__version__}"


def _forget(folder: Path) -> None:
    """Drop the marker of a cache that failed to load, so the next process rebuilds it."""
    try:
        (folder / _READY).unlink(missing_ok=True)
    except OSError:
        pass


def _cached_registry(folder: Path) -> pint.UnitRegistry:
    """pint's registry with its definitions cache in *folder*.

    A complete cache (marked by the file ``complete``) is read directly. Otherwise
    the cache is written to a private folder first and its files are moved in with
    ``os.replace``, so a process starting at the same moment never reads a half-written
    file; the marker comes last.
    """
    if (folder / _READY).is_file():
        return pint.UnitRegistry(autoconvert_offset_to_baseunit=True, cache_folder=folder)
    import shutil
    import tempfile

    folder.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=".build-", dir=folder))
    try:
        ureg = pint.UnitRegistry(autoconvert_offset_to_baseunit=True, cache_folder=tmp)
        for f in sorted(tmp.iterdir()):
            os.replace(f, folder / f.name)
        marker = tmp / _READY
        marker.write_text(f"pint {pint.__version__}\n", encoding="utf-8")
        os.replace(marker, folder / _READY)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return ureg


def _normalise(text: str) -> str:
    t = text.strip()
    t = t.replace("⁻¹", "**-1").replace("⁻²", "**-2").replace("⁻³", "**-3")
    t = t.translate(_SUPERSCRIPTS)
    t = t.replace("·", "*").replace("⋅", "*").replace("×", "*")
    t = t.replace("μ", "µ")  # Greek mu -> micro sign (pint knows both; keep one)
    t = re.sub(r"\s*\*\s*", "*", t)
    t = re.sub(r"(?<=[A-Za-zµ])\s+(?=[A-Za-zµ])", "*", t)  # "mPa s" -> "mPa*s"
    return t


@lru_cache(maxsize=4096)
def parse_unit(text: str) -> pint.Quantity:
    """Parse a unit as typed, returning a pint Quantity of magnitude 1 (or of the
    numeric factor written in the string, e.g. ``"1e-3 m"``).

    Raises
    ------
    UnitParseError
        When pint cannot read it; the message says what was read.
    """
    ureg = registry()
    raw = "" if text is None else str(text)
    t = _normalise(raw)
    if not t:
        raise UnitParseError("the unit is empty")
    if len(t) > 64:
        raise UnitParseError("the unit is longer than 64 characters")
    if t.lower() in _WORDS_DIMENSIONLESS:
        return ureg.Quantity(1.0, "dimensionless")
    if t == "%":
        return ureg.Quantity(1.0, "percent")
    try:
        q = ureg.parse_expression(t)
    except Exception as exc:  # pint raises several unrelated exception types
        raise UnitParseError(f"pint cannot read unit {raw!r} ({type(exc).__name__})") from None
    if not isinstance(q, ureg.Quantity):
        q = ureg.Quantity(float(q), "dimensionless")
    mag = float(q.magnitude)
    if not math.isfinite(mag) or mag <= 0:
        raise UnitParseError(f"unit {raw!r} has a non-positive or non-finite factor")
    return q


def dimensionality(kind: str) -> pint.util.UnitsContainer:
    """The pint dimensionality a quantity of this *kind* must have."""
    ureg = registry()
    expr = KIND_DIMENSIONS[kind]
    if not expr:
        return ureg.Quantity(1.0, "dimensionless").dimensionality
    return ureg.get_dimensionality(expr)


@lru_cache(maxsize=4096)
def conversion_factor(unit: str, canonical: str) -> float:
    """Multiply a value in *unit* by this to get it in *canonical*.

    Raises
    ------
    UnitParseError
        If either unit cannot be parsed.
    pint.DimensionalityError
        If the two units do not measure the same kind of thing.
    """
    q = parse_unit(unit)
    target = parse_unit(canonical)
    return float((q / target).to("dimensionless").magnitude)


def same_dimension(unit: str, canonical: str) -> bool:
    """True when *unit* and *canonical* measure the same kind of thing."""
    return parse_unit(unit).dimensionality == parse_unit(canonical).dimensionality


def usual_units(kinds) -> list[str]:
    """The usual units (:data:`USUAL_UNITS`) of the given kinds, in order, without repeats."""
    out: list[str] = []
    for k in kinds:
        for u in USUAL_UNITS.get(k, ()):
            if u not in out:
                out.append(u)
    return out


def pretty(unit: str) -> str:
    """A short, readable rendering of a unit for axis labels and tables (``µm``, ``m²``)."""
    q = parse_unit(unit)
    if q.dimensionless and q.magnitude == 1:
        return "1"
    return f"{q.units:~P}"
