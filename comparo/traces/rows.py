"""Reduced traces with their taxon's values, and as rows of the harmonised table.

Each function takes what it needs as arguments and returns its result; nothing here
reads a cache or calls a later room:

* :func:`with_taxon_values` takes a :class:`~comparo.traces.files.TraceSet` and the
  taxon values it rests on (``{(accepted taxon, key): (value, standard uncertainty,
  obs_ids)}``, canonical units, combined by the caller as the per-taxon table combines
  them: :func:`comparo.curation.combine.taxon_values`) and returns the traces with work
  density (odd modulus x signed loop area), the odd modulus a measured work density
  implies, and the mass-specific power (power / muscle mass). SI units.
* :func:`trace_rows` turns those traces into ``computed`` observation rows (one per trace
  and quantity of :data:`~comparo.traces.files.TABLE_KEYS`), ready to join the
  harmonised rows; their lineage names the trace, its file and the cycles used.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import replace

import numpy as np

from comparo.base.errors import InputError
from comparo.traces.files import KEY_INPUTS, SI_UNITS, TABLE_KEYS, TRACES_FILE, TraceSet

#: The taxon values the traces rest on (quantity keys): see :func:`with_taxon_values`.
TAXON_INPUTS = ("odd_modulus", "work_density", "muscle_mass")

TaxonValues = Mapping[tuple[str, str], tuple[float, float, tuple[str, ...]]]


def accepted_name(ds, name: str) -> str:
    """The accepted name of *name* (taxa.csv ``accepted_name``; *name* itself without one)."""
    t = ds.taxa
    if t is None or "taxon" not in t or "accepted_name" not in t:
        return name
    m = {a: b for a, b in zip(t["taxon"], t["accepted_name"], strict=True) if b}
    return m.get(name, name)


def with_taxon_values(ds, traces: TraceSet, values: TaxonValues) -> TraceSet:
    """Add what needs the taxon's other values (*values*: ``(accepted taxon, key) ->
    (value, standard uncertainty, obs_ids)`` in the catalogue's canonical unit of *key*, for
    the keys of :data:`TAXON_INPUTS`): work density = odd modulus x signed loop area and
    the odd modulus implied by a measured work density (strain cycles), mass-specific
    power = power / muscle mass (work loops). SI units."""
    from comparo.base import units

    kpa = units.conversion_factor(ds.catalog["odd_modulus"].unit, "Pa")
    jm3 = units.conversion_factor(ds.catalog["work_density"].unit, "J/m**3")
    kg = units.conversion_factor(ds.catalog["muscle_mass"].unit, "kg")
    out = []
    for r in traces.results:
        acc = accepted_name(ds, r.taxon)
        values_, per, inputs, extra = dict(r.values), dict(r.per_cycle), dict(r.inputs), {}
        if r.kind == "strain_cycle":
            k = values.get((acc, "odd_modulus"))
            if k is not None:
                ko = k[0] * kpa
                per["work_density"] = tuple(ko * a for a in r.per_cycle["loop_area"])
                sd = values_["loop_area"][1] * abs(ko)
                values_["work_density"] = (ko * values_["loop_area"][0], sd)
                inputs["odd_modulus"] = k[2]
                extra["odd_modulus"] = ko
            w = values.get((acc, "work_density"))
            area = values_["loop_area"][0]
            if w is not None and area != 0:
                extra["odd_modulus_implied"] = w[0] * jm3 / area
                inputs["work_density"] = w[2]
        else:
            m = values.get((acc, "muscle_mass"))
            if m is not None and m[0] > 0:
                mass = m[0] * kg
                per["mass_specific_power"] = tuple(p / mass for p in r.per_cycle["power"])
                values_["mass_specific_power"] = (
                    values_["power"][0] / mass,
                    values_["power"][1] / mass,
                )
                inputs["muscle_mass"] = m[2]
                extra["muscle_mass"] = mass
        out.append(replace(r, values=values_, per_cycle=per, inputs=inputs, **extra))
    return replace(traces, results=tuple(out))


# --------------------------------------------------------------------------- into the table


def trace_rows(ds, traces: TraceSet, columns: Mapping[str, object]):
    """One ``computed`` row per trace of *traces* (with its taxon values, see
    :func:`with_taxon_values`) and quantity of :data:`TABLE_KEYS`: the mean over cycles in
    the catalogue's unit; uncertainty the standard error over cycles, kind ``se``, n =
    cycles. ``inputs`` is ``trace:ID`` plus the obs_ids of taxon values used; ``notes``
    says file and cycles; ``_origin`` is ``traces.csv``. *columns* maps each column of the
    harmonised rows to its dtype: the rows come with those columns (empty text or NaN
    where a trace has nothing), in that order, plus ``_origin``. A DataFrame (no rows when
    no trace has a value).

    Raises
    ------
    InputError
        When a trace or traces.csv has an error (nothing is dropped silently).
    """
    import pandas as pd

    from comparo.base import units

    if not traces.ok:
        raise InputError([p for p in traces.problems if p.severity == "error"])
    ts = traces
    recs = []
    for r in ts.results:
        for key in TABLE_KEYS[r.kind]:
            if key not in r.values:
                continue
            mean, sd = r.values[key]
            q = ds.catalog[key]
            f = 1.0 / units.conversion_factor(q.unit, SI_UNITS[key])
            n = r.cycles
            se = sd / math.sqrt(n) * abs(f) if math.isfinite(sd) else math.nan
            ids = ";".join([f"trace:{r.trace_id}", *r.inputs.get(KEY_INPUTS.get(key, ""), ())])
            recs.append(
                {
                    "obs_id": f"{r.trace_id}:{key}",
                    "row": r.row,
                    "taxon": r.taxon,
                    "accepted": accepted_name(ds, r.taxon),
                    "quantity": key,
                    "quantity_key": key,
                    "value": mean * f,
                    "unit": q.unit,
                    "value_canonical": mean * f,
                    "unit_canonical": q.unit,
                    "uncertainty": se,
                    "uncertainty_canonical": se,
                    "uncertainty_kind": "se",
                    "n": float(n),
                    "u_h": se,
                    "value_h": mean * f,
                    "source_id": r.source_id,
                    "locator": r.locator,
                    "basis": "computed",
                    "basis_effective": "computed",
                    "inputs": ids,
                    "proxy_taxon": "",
                    "temperature_c": r.temperature_c if r.temperature_c is not None else math.nan,
                    "preparation": r.preparation,
                    "muscle": r.muscle,
                    "q10": math.nan,
                    "notes": r.lineage(),
                    "problem": "",
                    "temperature_factor": 1.0,
                    "temperature_note": "",
                    "status": "used",
                    "reason": "",
                    "merged_into": "",
                    "_origin": TRACES_FILE,
                }
            )
    order = [*[c for c in columns if c != "_origin"], "_origin"]
    add = pd.DataFrame(recs, columns=None if recs else order)
    for c, dtype in columns.items():
        if c not in add:
            add[c] = "" if str(dtype) == "object" else np.nan
    return add[order]
