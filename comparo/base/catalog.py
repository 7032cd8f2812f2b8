"""The quantity catalogue: ``schema/quantities.toml`` plus a dataset's own additions.

One object owns what each quantity key means: its canonical unit, kind,
plausible range and temperature sensitivity. Validators, converters and
reports all ask it.
"""

from __future__ import annotations

import tomllib
from collections.abc import Iterator, Mapping
from dataclasses import asdict, dataclass, field
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any

from comparo.base.errors import InputError, Problem
from comparo.base.results import Result


def package_folder(name: str) -> Path:
    """A top-level data folder shipped in the wheel as ``comparo.<name>``
    (``schema``, ``demo_tables``), or found in the source tree."""
    try:
        p = Path(str(resources.files(f"comparo.{name}")))
        if p.is_dir():
            return p
    except ModuleNotFoundError:  # pragma: no cover - source tree without install
        pass
    return Path(__file__).resolve().parent.parent / name


def schema_path(name: str) -> Path:
    """Path of a file in ``schema/``."""
    return package_folder("schema") / name


@lru_cache(maxsize=8)
def read_schema(name: str) -> dict[str, Any]:
    """Parsed TOML of a schema file (cached; treat as read-only)."""
    with open(schema_path(name), "rb") as fh:
        return tomllib.load(fh)


@dataclass(frozen=True)
class Quantity:
    """One catalogue entry. ``range`` is in the canonical ``unit``."""

    key: str
    label: str
    unit: str
    kind: str
    range: tuple[float, float] | None = None
    range_source: str = ""
    temperature_sensitive: bool = False
    q10: float | None = None
    description: str = ""
    converts_to: str | None = None
    factor: float = 1.0
    origin: str = "catalogue"  # or "comparo.toml"
    synonyms: tuple[str, ...] = ()  # other names a column header may use (``comparo import``)

    @property
    def is_time(self) -> bool:
        """Times shorten on warming: Q10 applies with the opposite sign."""
        return self.kind == "time"

    def to_dict(self) -> dict[str, Any]:
        d = asdict(self)
        d["range"] = list(self.range) if self.range else None
        d["synonyms"] = list(self.synonyms)
        return d


_FIELDS = {
    "label",
    "unit",
    "kind",
    "range",
    "range_source",
    "temperature_sensitive",
    "q10",
    "description",
    "converts_to",
    "factor",
    "synonyms",
}


def _entry(
    key: str, raw: Mapping[str, Any], origin: str, file: str
) -> tuple[Quantity | None, list[Problem]]:
    from comparo.base import units

    probs: list[Problem] = []

    def bad(col: str, value: Any, rule: str, msg: str, hint: str = "") -> None:
        probs.append(
            Problem(
                "error",
                file,
                None,
                f"quantities.{key}.{col}",
                None if value is None else str(value),
                rule,
                msg,
                hint,
            )
        )

    if not isinstance(raw, Mapping):
        bad("", raw, "quantity-entry", f"quantity {key!r} must be a table of fields")
        return None, probs
    unknown = set(raw) - _FIELDS
    for u in sorted(unknown):
        bad(
            u,
            raw[u],
            "quantity-field",
            f"unknown field {u!r} for quantity {key!r}",
            f"known fields: {', '.join(sorted(_FIELDS))}",
        )
    unit = raw.get("unit")
    kind = raw.get("kind")
    if not isinstance(unit, str) or not unit:
        bad("unit", unit, "quantity-unit", f"quantity {key!r} needs a canonical unit")
    else:
        try:
            units.check_unit(unit)
        except units.UnitParseError as exc:
            bad("unit", unit, "quantity-unit", str(exc))
    if kind is not None and kind not in units.KIND_DIMENSIONS:
        bad(
            "kind",
            kind,
            "quantity-kind",
            f"unknown kind {kind!r}",
            f"use one of {', '.join(units.KIND_DIMENSIONS)}",
        )
    rng = raw.get("range")
    if rng is not None:
        ok = (
            isinstance(rng, list | tuple)
            and len(rng) == 2
            and all(isinstance(v, int | float) for v in rng)
            and rng[0] < rng[1]
        )
        if not ok:
            bad("range", rng, "quantity-range", "range must be [low, high] with low < high")
            rng = None
    syn = raw.get("synonyms", [])
    if not isinstance(syn, list) or not all(isinstance(v, str) and v.strip() for v in syn):
        bad("synonyms", syn, "quantity-synonyms", "synonyms must be a list of non-empty strings")
    if probs:
        return None, probs
    if kind is None:  # a user's own quantity may omit the kind: it is then read off the unit
        kind = next((k for k in units.KIND_DIMENSIONS if units.measures(unit, k)), "other")
    elif not units.measures(unit, kind):
        bad("unit", unit, "quantity-unit-kind", f"unit {unit!r} does not measure a {kind}")
        return None, probs
    q = Quantity(
        key=key,
        label=str(raw.get("label", key.replace("_", " ").capitalize())),
        unit=unit,
        kind=kind,
        range=tuple(float(v) for v in rng) if rng else None,
        range_source=str(raw.get("range_source", "")),
        temperature_sensitive=bool(raw.get("temperature_sensitive", False)),
        q10=float(raw["q10"]) if raw.get("q10") is not None else None,
        description=str(raw.get("description", "")),
        converts_to=raw.get("converts_to"),
        factor=float(raw.get("factor", 1.0)),
        origin=origin,
        synonyms=tuple(v.strip() for v in syn),
    )
    return q, probs


@dataclass(frozen=True)
class Catalog(Result, Mapping[str, Quantity]):
    """Mapping ``key -> Quantity`` (read-only)."""

    entries: dict[str, Quantity] = field(default_factory=dict)

    def __getitem__(self, key: str) -> Quantity:
        return self.entries[key]

    def __iter__(self) -> Iterator[str]:
        return iter(self.entries)

    def __len__(self) -> int:
        return len(self.entries)

    def __hash__(self) -> int:
        return id(self)

    def target(self, key: str) -> Quantity:
        """The quantity a key's values are stored as (``fiber_diameter`` -> ``fiber_radius``)."""
        q = self.entries[key]
        return self.entries[q.converts_to] if q.converts_to else q

    def to_frame(self):
        """One row per quantity, the columns of :meth:`Quantity.to_dict`."""
        import pandas as pd

        return pd.DataFrame([q.to_dict() for q in self.entries.values()])

    def to_dict(self) -> dict[str, Any]:
        """``key -> Quantity.to_dict()`` (JSON-safe)."""
        from comparo.base.jsonsafe import json_safe

        return json_safe({k: q.to_dict() for k, q in self.entries.items()})

    def summary(self) -> str:
        """Plain text: how many quantities, and their keys."""
        return f"catalogue of {len(self)} quantities: " + ", ".join(self.entries)


def load_catalog(extra: Mapping[str, Any] | None = None, file: str = "comparo.toml") -> Catalog:
    """The built-in catalogue, plus *extra* entries (the ``[quantities]`` table of a
    dataset's comparo.toml). A user entry may add a key or replace a built-in one.

    Raises
    ------
    InputError
        If a user entry is malformed (every problem listed).
    """
    from comparo.base.arguments import check_mapping

    check_mapping(
        extra, "extra", "a mapping of quantity keys to entries, like [quantities] of comparo.toml"
    )
    entries: dict[str, Quantity] = {}
    builtin = read_schema("quantities.toml")
    for key, raw in builtin.items():
        q, probs = _entry(key, raw, "catalogue", "schema/quantities.toml")
        if probs:  # pragma: no cover - the shipped catalogue is tested
            raise InputError(probs)
        entries[key] = q
    problems: list[Problem] = []
    for key, raw in (extra or {}).items():
        q, probs = _entry(key, raw, "comparo.toml", file)
        problems += probs
        if q is not None:
            entries[key] = q
    for key, q in entries.items():
        if q.converts_to and q.converts_to not in entries:
            problems.append(
                Problem(
                    "error",
                    file,
                    None,
                    f"quantities.{key}.converts_to",
                    q.converts_to,
                    "quantity-alias",
                    f"{key!r} converts to unknown quantity {q.converts_to!r}",
                )
            )
    if problems:
        raise InputError(problems)
    return Catalog(entries)
