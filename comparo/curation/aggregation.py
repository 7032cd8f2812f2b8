"""The per-taxon table: one row per accepted taxon, and what each of its columns holds.

:func:`per_taxon` takes a dataset and (optionally) its :class:`~comparo.curation.harmonise.
Harmonised` rows and returns the table (values combined by
:func:`comparo.curation.combine.aggregate_quantity`); :func:`column_units` takes a
per-taxon or derived table and the catalogue and returns the unit and meaning of each
column (``table.units.csv``).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from comparo.base.shared import SharedRecord
from comparo.curation.combine import aggregate_quantity
from comparo.curation.harmonise import Harmonised, harmonise, taxon_groups, thermal_columns
from comparo.validation.numbers import map_distinct
from comparo.validation.rows import BASIS_ORDER
from comparo.validation.tables import Dataset


def per_taxon(
    ds: Dataset,
    *,
    temperature: bool = True,
    aggregate: str | None = None,
    harmonised: Harmonised | None = None,
) -> pd.DataFrame:
    """One row per accepted taxon: per quantity Q the columns ``Q`` (value in the
    catalogue's canonical unit), ``Q_u`` (standard uncertainty), ``Q_n`` (values
    behind it), ``Q_nsrc`` (sources behind it), ``Q_basis`` (weakest basis:
    reported > computed > digitized > proxy > assumed) and ``Q_obs`` (';'-joined
    obs_ids). Also ``taxon``, the grouping columns of taxa.csv and
    ``temperature_c`` (°C the temperature-sensitive values refer to).

    Aggregation (``aggregate`` or settings ``aggregate``): ``mean`` (default) is
    the inverse-variance weighted mean when every value has an uncertainty
    (standard uncertainty 1/sqrt(sum w), inflated by the Birge ratio when the
    values scatter more than their uncertainties allow), else the n-weighted
    mean (uncertainty: sd of the values / sqrt(k)); ``median`` the median.
    """
    from comparo.validation.dataset import as_dataset

    ds = as_dataset(ds)
    how = aggregate or ds.settings.get("aggregate", "mean")
    if how not in ("mean", "median"):
        from comparo.base.errors import UsageError

        raise UsageError(f"aggregate must be 'mean' or 'median', not {how!r}")
    h = harmonised or harmonise(ds, temperature=temperature)
    used = h.rows[h.rows["status"] == "used"]
    cat = ds.catalog
    taxa = sorted(
        set(h.rows.loc[h.rows["status"] != "excluded", "accepted"]) | set(used["accepted"])
    )
    out = pd.DataFrame({"taxon": taxa})
    groups = taxon_groups(ds)
    if len(groups.columns) > 1:
        out = out.merge(groups, on="taxon", how="left")
        for c in groups.columns[1:]:
            out[c] = out[c].fillna("")
    if h.policy is not None and h.policy.operating:
        _, t_op, _ = thermal_columns(ds, out["taxon"])
        out["temperature_c"] = np.where(np.isfinite(t_op), t_op, h.reference_temperature_c)
    elif h.reference_temperature_c is not None:
        out["temperature_c"] = h.reference_temperature_c
    else:
        ts = used[
            map_distinct(used["quantity_key"], lambda k: k in cat and cat[k].temperature_sensitive)
        ]
        out["temperature_c"] = out["taxon"].map(ts.groupby("accepted")["temperature_c"].mean())
    rank = {b: i for i, b in enumerate(BASIS_ORDER)}
    order = [k for k in cat if not cat[k].converts_to]
    blocks = []
    for q in order:
        part = used[used["quantity_key"] == q]
        if part.empty:
            continue
        block = aggregate_quantity(part, q, how, rank)
        if cat[q].temperature_sensitive:
            block[f"{q}_temp_c"] = _temperature_of(part).reindex(block.index).to_numpy(float)
        blocks.append(block)
    if blocks:
        wide = pd.concat(blocks, axis=1)
        out = out.merge(wide, left_on="taxon", right_index=True, how="left")
        for c in out.columns:
            if c.endswith(("_n", "_nsrc")):
                out[c] = out[c].fillna(0).astype(int)
            elif c.endswith(("_basis", "_obs")):
                out[c] = out[c].fillna("")
    out.attrs["reference_temperature_c"] = h.reference_temperature_c
    out.attrs["temperature"] = SharedRecord(_temperature_record(used, cat, h))
    return out


# what the columns of the per-taxon and derived tables hold, by suffix (longest first)
_SUFFIX_MEANING: tuple[tuple[str, bool, str], ...] = (  # suffix, in the quantity's unit?, meaning
    ("_mc_median", True, "Monte Carlo median"),
    ("_mc_lo68", True, "Monte Carlo 68% interval, low end"),
    ("_mc_hi68", True, "Monte Carlo 68% interval, high end"),
    ("_mc_lo95", True, "Monte Carlo 95% interval, low end"),
    ("_mc_hi95", True, "Monte Carlo 95% interval, high end"),
    ("_mc_u", True, "Monte Carlo standard deviation"),
    ("_nonlinear", False, "first-order and Monte Carlo uncertainties differ by more than 20%"),
    ("_temp_c", False, "temperature (°C) the per-taxon value refers to"),
    ("_nsrc", False, "number of distinct sources behind the value"),
    (
        "_basis",
        False,
        "weakest basis of the values behind it (reported > computed > digitized > proxy > assumed)",
    ),
    ("_method", False, "how the derived value was computed"),
    ("_missing", False, "inputs missing for the derived value"),
    ("_obs", False, "obs_ids of the values behind it (;-joined)"),
    ("_n", False, "number of values combined"),
    ("_u", True, "standard uncertainty"),
)


def column_units(table: pd.DataFrame, catalog) -> pd.DataFrame:
    """What each column of a per-taxon (or derived) table holds: columns ``column``, ``unit``
    (the canonical unit as pint reads it; empty for text, counts and dimensionless columns)
    and ``meaning``. Units of derived keys come from ``table.attrs['units']``; the
    catalogue gives the others. This is the table written beside a per-taxon CSV
    (``table.units.csv``)."""
    derived = dict(table.attrs.get("units", {}))
    keys = {k: catalog[k].unit for k in catalog} | derived
    groups = set(table.columns) - {"taxon", "temperature_c"}
    rows = []
    for col in table.columns:
        unit, meaning = "", ""
        if col == "taxon":
            meaning = "accepted taxon name"
        elif col == "temperature_c":
            unit, meaning = "degC", "temperature the temperature-sensitive values refer to"
        elif col == "operating_temperature_c":
            unit, meaning = (
                "degC",
                "operating (body or muscle) temperature during the behaviour (taxa.csv)",
            )
        elif col in keys:
            unit, meaning = (
                keys[col],
                "value in the canonical unit" if col not in derived else "derived value",
            )
        elif col == "regime":
            meaning = "kinetic, hydraulic or undetermined"
        else:
            for suffix, same, what in _SUFFIX_MEANING:
                base = col[: -len(suffix)]
                if col.endswith(suffix) and base in keys | {"regime": ""}:
                    unit = keys.get(base, "") if same else ("degC" if suffix == "_temp_c" else "")
                    meaning = f"{base}: {what}"
                    break
            else:
                if col in groups:
                    meaning = "grouping column (taxa.csv)"
        rows.append(
            {
                "column": col,
                "unit": "" if unit in ("1", "dimensionless") else unit,
                "meaning": meaning,
            }
        )
    return pd.DataFrame(rows, columns=["column", "unit", "meaning"])


def _temperature_of(part: pd.DataFrame) -> pd.Series:
    """°C each taxon's value of one quantity refers to: the mean over its values of the
    temperature each refers to (the target where normalised, the measured temperature
    where kept as measured, not normalised or computed from a trace); NaN where no value
    has one. Values at different temperatures are combined as they are (the per-taxon
    value then refers to their mean temperature; docs/methods/temperature.md)."""
    vt = (
        pd.to_numeric(part["value_temp_c"], errors="coerce")
        if "value_temp_c" in part
        else pd.Series(np.nan, index=part.index)
    )
    vt = vt.fillna(pd.to_numeric(part["temperature_c"], errors="coerce"))
    return vt.groupby(part["accepted"].to_numpy(object)).mean()


def _temperature_record(used: pd.DataFrame, cat, h: Harmonised) -> dict[str, Any]:
    """``attrs["temperature"]`` of the per-taxon table: where values were brought (``to``)
    and, per quantity and taxon, what happened to its temperature-sensitive values used:
    ``(quantity, taxon, values, rescaled, lowest factor, highest factor, kept as measured,
    without temperature, rescaled to the fallback)`` (factors over the rescaled values; ±inf
    when none; the last: with ``"operating"``, rescaled values of a taxon without an operating
    temperature, brought to ``fallback_c``). Read by
    :func:`comparo.validation.temperature.fit_temperature`."""
    ts = used[
        map_distinct(
            used["quantity_key"], lambda k: k in cat and cat[k].temperature_sensitive
        ).to_numpy(bool)
    ]
    rule = (
        ts["temperature_rule"].fillna("").astype(str).to_numpy(object)
        if "temperature_rule" in ts
        else np.full(len(ts), "", dtype=object)
    )
    if h.policy is None:
        treat = np.full(len(ts), "off", dtype=object)
    else:
        treat = np.select(
            [(rule == "Q10") | (rule == "Arrhenius"), rule == "as measured", rule == "none"],
            ["normalised", "kept", "none"],
            "measured",
        )
    f = ts["temperature_factor"].to_numpy(float)
    norm = (treat == "normalised") & (f != 1.0)
    note = (
        ts["temperature_note"].fillna("").astype(str)
        if "temperature_note" in ts
        else pd.Series("", index=ts.index)
    )
    fallback = (
        norm & note.str.contains("no operating_temperature_c: fallback", regex=False).to_numpy()
    )
    part = pd.DataFrame(
        {
            "q": ts["quantity_key"].to_numpy(object),
            "t": ts["accepted"].to_numpy(object),
            "n": np.ones(len(ts), dtype=int),
            "rescaled": norm.astype(int),
            "fmin": np.where(norm, f, np.inf),
            "fmax": np.where(norm, f, -np.inf),
            "kept": (treat == "kept").astype(int),
            "none": (treat == "none").astype(int),
            "fallback": fallback.astype(int),
        }
    )
    agg = part.groupby(["q", "t"], sort=False).agg(
        n=("n", "sum"),
        rescaled=("rescaled", "sum"),
        fmin=("fmin", "min"),
        fmax=("fmax", "max"),
        kept=("kept", "sum"),
        none=("none", "sum"),
        fallback=("fallback", "sum"),
    )
    recs = tuple(
        (
            q,
            t,
            int(r.n),
            int(r.rescaled),
            float(r.fmin),
            float(r.fmax),
            int(r.kept),
            int(r.none),
            int(r.fallback),
        )
        for (q, t), r in zip(agg.index, agg.itertuples(index=False), strict=True)
    )
    return {
        "to": h.policy.target_text if h.policy is not None else "off",
        "values": recs,
        "fallback_c": h.policy.reference_c if h.policy is not None else None,
    }
