"""The one unit registry of comparo, and the parsing of units as users type them.

Everything that converts a unit asks this module; no conversion factor is
written anywhere else. Parsing is cached per distinct unit string, so a
100,000-row table with a dozen distinct units costs a dozen parses.

The registry is pint's full default registry. Importing pint and starting its
registry costs about 0.2 s per process, more than the everyday commands spend on
anything else, so two things keep it off their path:

- **The unit facts** (``comparo/base/unit_facts.json``, package data): for every unit
  string comparo itself uses or usually sees (the catalogue's canonical units, the
  usual units per kind, the SI units of the derivation and of the traces, the demo's
  units and common spellings), pint's own answers, computed once by pint with
  ``python tools/build_unit_facts.py``: the factor to SI base units, the dimensionality,
  the offset of offset units (°C) and the short rendering. :func:`facts`,
  :func:`conversion_factor`, :func:`same_dimension`, :func:`measures`,
  :func:`base_factor` and :func:`pretty` answer from the table when every unit they
  are given is in it, and ask pint otherwise. The table is used only when the
  installed pint is the version that computed it; the test suite recomputes it with a
  fresh full registry and fails when it is stale.
- **pint's disk cache**: when pint is needed, its parsed definitions are kept in
  pint's own cache (a folder per pint version under the user cache folder, or under
  ``COMPARO_CACHE_DIR``; ``COMPARO_CACHE_DIR=""`` turns the cache off). The cache
  holds what pint parsed from its own file, so the conversions are the same; when the
  folder cannot be written or read, the registry is built without it.
"""

from __future__ import annotations

import json
import math
import os
import re
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # pint is imported only when a unit is not in the unit facts
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


#: Definitions comparo adds to pint's default registry.
EXTRA_DEFINITIONS: tuple[str, ...] = ("fraction_unit = 1 = fraction",)

#: The unit facts shipped with the package (written by ``python tools/build_unit_facts.py``).
FACTS_FILE = Path(__file__).with_name("unit_facts.json")


class UnitParseError(ValueError):
    """A unit string pint cannot read."""


class UnitMismatchError(ValueError):
    """Two units that do not measure the same kind of thing (the message names both and
    their dimensions, in words a user reads, never a library's exception name)."""


@dataclass(frozen=True)
class UnitFacts:
    """What pint says about one unit string (as parsed by :func:`parse_unit`).

    ``factor``: the magnitude of pint's ``to_base_units()`` of the parsed unit (a value
    of 1 in the unit, in SI base units; for an offset unit such as °C the offset is
    included, as pint's conversions with offsets converted to base units give it).
    ``dimensions``: pint's dimensionality as sorted ``(dimension, exponent)`` pairs
    (empty when dimensionless). ``offset``: the SI base-unit value of 0 in the unit
    (273.15 for °C), ``None`` for a unit without one. ``pretty``: :func:`pretty`'s text.
    """

    factor: float
    dimensions: tuple[tuple[str, float], ...]
    offset: float | None
    pretty: str

    def to_dict(self) -> dict:
        return {
            "factor": self.factor,
            "dimensions": dict(self.dimensions),
            "offset": self.offset,
            "pretty": self.pretty,
        }


def new_registry(cache_folder: Path | None = None) -> pint.UnitRegistry:
    """A new pint default registry as comparo uses it (offset units converted to base
    units in products, :data:`EXTRA_DEFINITIONS` added), with pint's definitions cache in
    *cache_folder* when given."""
    import pint

    ureg = pint.UnitRegistry(autoconvert_offset_to_baseunit=True, cache_folder=cache_folder)
    for line in EXTRA_DEFINITIONS:
        ureg.define(line)
    return ureg


@lru_cache(maxsize=1)
def registry() -> pint.UnitRegistry:
    """The shared pint registry (created once, the first time a unit is not in the unit facts).

    Adds nothing but a few spellings biologists use; ``micron``, ``µm``,
    ``um``, ``Hz``, ``kPa``, ``1/s`` and ``s^-1`` are pint's own.
    """
    folder = cache_folder()
    if folder is not None:
        try:
            return _cached_registry(folder)
        except Exception:  # an unwritable or damaged cache costs time, never a result
            _forget(folder)
    return new_registry()


_READY = "complete"


def cache_base() -> Path | None:
    """comparo's cache folder: ``$COMPARO_CACHE_DIR``, else the user cache folder's ``comparo``
    (``~/.cache/comparo`` on Linux); ``None`` when ``COMPARO_CACHE_DIR`` is empty (no cache)."""
    env = os.environ.get("COMPARO_CACHE_DIR")
    if env == "":
        return None
    if env is None:
        import platformdirs  # a dependency of pint

        return platformdirs.user_cache_path(appname="comparo", appauthor=False)
    return Path(env)


def cache_folder() -> Path | None:
    """Folder of the registry cache: ``$COMPARO_CACHE_DIR/pint-VERSION`` or the user
    cache folder's ``comparo/pint-VERSION``; ``None`` when ``COMPARO_CACHE_DIR`` is empty."""
    base = cache_base()
    if base is None:
        return None
    import pint

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
        return new_registry(folder)
    import shutil
    import tempfile

    import pint

    folder.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=".build-", dir=folder))
    try:
        ureg = new_registry(tmp)
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
    t = (
        t.replace("·", "*").replace("⋅", "*").replace("×", "*").replace("−", "-")
    )  # U+2212, the printed minus
    t = t.replace("μ", "µ")  # Greek mu -> micro sign (pint knows both; keep one)
    t = re.sub(r"\s*\*\s*", "*", t)
    t = re.sub(r"(?<=[A-Za-zµ])\s+(?=[A-Za-zµ])", "*", t)  # "mPa s" -> "mPa*s"
    t = re.sub(r"(?<=[A-Za-zµ][-\d])\s+(?=[A-Za-zµ])", "*", t)  # "µm2 s-1" -> "µm2*s-1"
    # exponents as journals print them: "s-1", "s^-1", "µm2", "mm-2" -> "s**-1", "µm**2"
    # (a number's exponent, "1e-3", and names with digits inside, "cmH2O", are left alone)
    return _JOURNAL_POWER.sub(r"\1**\2", t)


_JOURNAL_POWER = re.compile(r"(?<![\d.A-Za-zµ])([A-Za-zµ]+)(?:\^|\*\*)?([-+]?\d+)(?![\d.A-Za-zµ])")


def facts_key(text: str) -> str:
    """The key of *text* in the unit facts: the string :func:`parse_unit` hands to pint
    (``"1"`` for the words it reads as dimensionless)."""
    t = _normalise("" if text is None else str(text))
    return "1" if t.lower() in _WORDS_DIMENSIONLESS else t


@lru_cache(maxsize=4096)
def parse_unit(text: str) -> pint.Quantity:
    """Parse a unit as typed, returning a pint Quantity of magnitude 1 (or of the
    numeric factor written in the string, e.g. ``"1e-3 m"``). Imports pint; the
    everyday questions about units have pint-free answers (:func:`facts`).

    Raises
    ------
    UnitParseError
        When pint cannot read it; the message says what was read.
    """
    return parse_with(registry(), text)


def parse_with(ureg: pint.UnitRegistry, text: str) -> pint.Quantity:
    """:func:`parse_unit` with the registry *ureg* (the unit facts are computed with this)."""
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
    except (
        Exception
    ):  # pint raises several unrelated exception types; their names mean nothing to a user
        raise UnitParseError(
            f"unit {raw!r} is not a unit comparo reads (an unknown name or a typo?)"
        ) from None
    if not isinstance(q, ureg.Quantity):
        q = ureg.Quantity(float(q), "dimensionless")
    mag = float(q.magnitude)
    if not math.isfinite(mag) or mag <= 0:
        raise UnitParseError(f"unit {raw!r} has a non-positive or non-finite factor")
    return q


def _dims(container) -> tuple[tuple[str, float], ...]:
    """pint's dimensionality as sorted (dimension, exponent) pairs."""
    return tuple(sorted((str(d), e) for d, e in container.items()))


def facts_of(q: pint.Quantity) -> UnitFacts:
    """The facts of a parsed unit, asked of pint (the registry of *q*)."""
    try:
        factor = float(q.to_base_units().magnitude)
        zero = float(q._REGISTRY.Quantity(0.0, q.units).to_base_units().magnitude)
    except Exception:  # a unit pint reads but cannot bring to base units: no factor (NaN)
        factor, zero = math.nan, 0.0
    shown = "1" if q.dimensionless and q.magnitude == 1 else f"{q.units:~P}"
    return UnitFacts(factor, _dims(q.dimensionality), zero if zero else None, shown)


def _installed_pint_is(version: str) -> bool:
    """True when the pint found on the path is *version* (its ``dist-info`` folder, one
    stat: no import of pint)."""
    from importlib.util import find_spec

    try:
        spec = find_spec("pint")
    except (ImportError, ValueError):
        return False
    if spec is None or not spec.origin:
        return False
    return (Path(spec.origin).parent.parent / f"pint-{version}.dist-info").is_dir()


@lru_cache(maxsize=1)
def _table() -> tuple[dict[str, UnitFacts], dict[str, tuple]] | None:
    """The unit facts and the dimensions of each kind, or ``None`` when the file is
    missing or damaged or was computed by another pint version (pint then answers)."""
    try:
        doc = json.loads(FACTS_FILE.read_text(encoding="utf-8"))
        if not _installed_pint_is(str(doc["pint"])):
            return None
        table = {
            k: UnitFacts(
                float(v["factor"]),
                tuple(sorted(v["dimensions"].items())),
                None if v["offset"] is None else float(v["offset"]),
                str(v["pretty"]),
            )
            for k, v in doc["units"].items()
        }
        kinds = {k: tuple(sorted(v.items())) for k, v in doc["kinds"].items()}
    except (OSError, ValueError, KeyError, TypeError, AttributeError):
        return None
    return table, kinds


@lru_cache(maxsize=4096)
def facts(text: str) -> UnitFacts:
    """pint's facts about a unit as typed: from the unit facts when the unit is in them,
    else from pint (imported then).

    Raises
    ------
    UnitParseError
        When pint cannot read it (the message of :func:`parse_unit`).
    """
    t = _table()
    if t is not None:
        hit = t[0].get(facts_key(text))
        if hit is not None:
            return hit
    return facts_of(parse_unit(text))


def check_unit(text: str) -> None:
    """Raise :class:`UnitParseError` (the message of :func:`parse_unit`) when pint cannot
    read *text*."""
    facts(text)


def unit_dimensions(text: str) -> tuple[tuple[str, float], ...]:
    """pint's dimensionality of a unit as sorted ``(dimension, exponent)`` pairs."""
    return facts(text).dimensions


def kind_dimensions(kind: str) -> tuple[tuple[str, float], ...]:
    """The dimensionality a quantity of this *kind* must have, as :func:`unit_dimensions` gives
    it."""
    t = _table()
    if t is not None and kind in t[1]:
        return t[1][kind]
    return _dims(dimensionality(kind))


def measures(unit: str, kind: str) -> bool:
    """True when *unit* measures a quantity of *kind* (its dimensionality is the kind's)."""
    return unit_dimensions(unit) == kind_dimensions(kind)


def base_factor(unit: str) -> float:
    """A value of 1 in *unit*, in SI base units (pint's ``to_base_units()``)."""
    return facts(unit).factor


def dimensionality(kind: str) -> pint.util.UnitsContainer:
    """The pint dimensionality a quantity of this *kind* must have (imports pint;
    :func:`kind_dimensions` does not)."""
    ureg = registry()
    expr = KIND_DIMENSIONS[kind]
    if not expr:
        return ureg.Quantity(1.0, "dimensionless").dimensionality
    return ureg.get_dimensionality(expr)


@lru_cache(maxsize=4096)
def conversion_factor(unit: str, canonical: str) -> float:
    """Multiply a value in *unit* by this to get it in *canonical* (dimensionless).

    When both units are in the unit facts and measure the same thing, the ratio of their
    factors to SI base units; otherwise pint's ``(unit / canonical).to("dimensionless")``.

    Raises
    ------
    UnitParseError
        If either unit cannot be parsed.
    UnitMismatchError
        If the two units do not measure the same kind of thing.
    """
    t = _table()
    if t is not None:
        a, b = t[0].get(facts_key(unit)), t[0].get(facts_key(canonical))
        if a is not None and b is not None and a.dimensions == b.dimensions:
            return a.factor / b.factor
    q = parse_unit(unit)
    target = parse_unit(canonical)
    try:
        return float((q / target).to("dimensionless").magnitude)
    except Exception:  # pint's DimensionalityError: said in words below
        raise UnitMismatchError(
            f"{unit!r} ({q.dimensionality}) cannot be converted to {canonical!r} "
            f"({target.dimensionality}): they measure different things"
        ) from None


def same_dimension(unit: str, canonical: str) -> bool:
    """True when *unit* and *canonical* measure the same kind of thing."""
    return unit_dimensions(unit) == unit_dimensions(canonical)


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
    return facts(unit).pretty
