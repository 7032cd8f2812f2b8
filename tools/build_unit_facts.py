"""Compute the unit facts shipped as ``comparo/base/unit_facts.json``, with pint.

Run ``python tools/build_unit_facts.py`` after changing the catalogue's units, the usual
units, the SI units of the derivation or of the traces, the demo's units or pint's
version (the test suite fails until then). ``python tools/build_unit_facts.py PATH`` writes
elsewhere; ``-`` writes to standard output. The file is written atomically.

Every number comes from pint's full default registry parsed afresh from pint's own
definitions file (no disk cache), through :func:`comparo.base.units.parse_with`, so a unit
in the table gets exactly the answer :func:`comparo.base.units.parse_unit` would give. What
is covered is listed by :func:`covered_units`; any other unit is still read by pint.
"""

from __future__ import annotations

import csv
import json
import math
import sys
from typing import Any

from comparo.base import units

#: Spellings users type, beside the units comparo itself names (see :func:`covered_units`).
SPELLINGS: tuple[str, ...] = (
    # length, area, volume
    "nm",
    "um",
    "µm",
    "μm",
    "micron",
    "microns",
    "micrometer",
    "micrometre",
    "mm",
    "cm",
    "m",
    "nm**2",
    "nm²",
    "um**2",
    "µm²",
    "mm**2",
    "mm²",
    "m**2",
    "m²",
    "um**3",
    "µm³",
    "mm**3",
    "mm³",
    "m**3",
    "m³",
    "µL",
    "uL",
    "mL",
    "L",
    # mass
    "µg",
    "ug",
    "mg",
    "g",
    "kg",
    # time, rate, frequency
    "ns",
    "µs",
    "us",
    "ms",
    "s",
    "min",
    "h",
    "1/s",
    "s^-1",
    "s**-1",
    "s⁻¹",
    "1/ms",
    "1/min",
    "Hz",
    "kHz",
    "mHz",
    # stress, viscosity, diffusivity
    "Pa",
    "kPa",
    "MPa",
    "GPa",
    "mPa*s",
    "mPa s",
    "mPa·s",
    "Pa*s",
    "Pa s",
    "Pa·s",
    "cP",
    "P",
    "um**2/s",
    "µm²/s",
    "mm**2/s",
    "mm²/s",
    "m**2/s",
    "m²/s",
    # force, energy, power
    "N",
    "mN",
    "µN",
    "uN",
    "J",
    "mJ",
    "µJ",
    "kJ",
    "J/m**3",
    "kJ/m**3",
    "J/kg",
    "W",
    "mW",
    "µW",
    "W/kg",
    "mW/g",
    "J/mol",
    "kJ/mol",
    # as journals print them (exponents without '**')
    "s-1",
    "min-1",
    "µm2",
    "um2",
    "nm2",
    "mm2",
    "µm2 s-1",
    "m s-1",
    "mm s-1",
    "mN mm-2",
    "kN m-2",
    "W kg-1",
    "J kg-1",
    # dimensionless, temperature
    "1",
    "dimensionless",
    "fraction",
    "ratio",
    "count",
    "%",
    "percent",
    "degC",
    "°C",
    "K",
)


def _catalogue_units() -> list[str]:
    from comparo.base.catalog import read_schema

    out = [
        q["unit"]
        for q in read_schema("quantities.toml").values()
        if isinstance(q, dict) and "unit" in q
    ]
    derived = read_schema("derived.toml").get("keys", {})
    out += [q["unit"] for q in derived.values() if isinstance(q, dict) and "unit" in q]
    return out


def _demo_units() -> list[str]:
    """The unit cells of the demo compilation's observations.csv and traces.csv."""
    from comparo.base.catalog import package_folder

    folder = package_folder("demo_tables") / "synthetic_cyclers"
    out: list[str] = []
    for name, cols in (
        ("observations.csv", ("unit",)),
        ("traces.csv", ("time_unit", "x_unit", "y_unit")),
    ):
        with open(folder / name, encoding="utf-8", newline="") as fh:
            out += [row[c] for row in csv.DictReader(fh) for c in cols if row.get(c)]
    return out


def covered_units() -> list[str]:
    """Every unit string the table answers for, as written (before normalising): the
    catalogue's canonical units (quantities.toml, derived.toml),
    :data:`comparo.base.units.USUAL_UNITS`, the SI units of the derivation and of the traces,
    the demo's units and :data:`SPELLINGS`."""
    from comparo.derivation.compute import _SI
    from comparo.traces.files import SI_UNITS

    found = [
        *_catalogue_units(),
        *(u for us in units.USUAL_UNITS.values() for u in us),
        *_SI.values(),
        *SI_UNITS.values(),
        *_demo_units(),
        *SPELLINGS,
    ]
    return list(dict.fromkeys(found))


def build(ureg) -> dict[str, Any]:
    """The unit facts document computed with the pint registry *ureg* (keys: ``pint``,
    the pint version; ``kinds``, kind -> dimensions; ``units``, key -> facts)."""
    import pint

    table: dict[str, dict[str, Any]] = {}
    for text in covered_units():
        f = units.facts_of(units.parse_with(ureg, text))
        if not math.isfinite(f.factor):
            raise ValueError(f"pint gives no factor to base units for {text!r}")
        table.setdefault(units.facts_key(text), f.to_dict())
    kinds = {}
    for kind, expr in units.KIND_DIMENSIONS.items():
        dims = (
            ureg.Quantity(1.0, "dimensionless").dimensionality
            if not expr
            else ureg.get_dimensionality(expr)
        )
        kinds[kind] = dict(sorted((str(d), e) for d, e in dims.items()))
    return {
        "about": "pint's answers for the units comparo names or usually sees; written by "
        "'python tools/build_unit_facts.py' (do not edit)",
        "pint": pint.__version__,
        "kinds": kinds,
        "units": dict(sorted(table.items())),
    }


def dumps(doc: dict[str, Any]) -> str:
    """The document as JSON text, one kind or unit per line (readable diffs)."""

    def one(v: Any) -> str:
        return json.dumps(v, ensure_ascii=False)

    parts = [f" {one(k)}: {one(v)}" for k, v in doc.items() if not isinstance(v, dict)]
    for name in ("kinds", "units"):
        rows = ",\n".join(f"  {one(k)}: {one(v)}" for k, v in doc[name].items())
        parts.append(f" {one(name)}: {{\n{rows}\n }}")
    return "{\n" + ",\n".join(parts) + "\n}\n"


def main(argv: list[str] | None = None) -> int:
    from comparo.base.outputs import atomic_write_text

    args = sys.argv[1:] if argv is None else argv
    path = args[0] if args else str(units.FACTS_FILE)
    doc = build(units.new_registry())
    atomic_write_text(path, dumps(doc))
    if path != "-":
        print(f"{len(doc['units'])} units (pint {doc['pint']}) written to {path}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
