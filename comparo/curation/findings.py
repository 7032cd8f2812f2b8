"""What ``comparo check`` reports about the harmonised rows (curation's findings).

:func:`diagnostics` takes a dataset and its :class:`~comparo.curation.harmonise.Harmonised`
rows and returns Problems: temperature factors out of range (errors), duplicates, unit slips
and conflicts (warnings), the temperature policy's notes, borrowed or read-off values,
synonyms and the rows computed from traces (notes). It calls no later room: the pipeline
(:mod:`comparo.pipeline`) adds the check against relatives on the tree.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pandas as pd

from comparo.base.errors import Problem
from comparo.curation.harmonise import Harmonised, describe_value, thermal_columns
from comparo.validation.tables import Dataset


def observations_file(ds: Dataset) -> str:
    """The name of the dataset's observations file (``observations`` when unknown)."""
    return ds.files["observations"].name if "observations" in ds.files else "observations"


def problem_file(ds: Dataset, harmonised: Harmonised) -> Callable[[str], str]:
    """obs_id -> the file a problem of that row names: traces.csv for a row computed from
    a trace (its ``_origin``), the observations file otherwise."""
    rows = harmonised.rows
    origin = dict(zip(rows["obs_id"], rows["_origin"], strict=True)) if "_origin" in rows else {}
    obs_file = observations_file(ds)

    def file_of(obs_id: str) -> str:
        return origin.get(obs_id) or obs_file

    return file_of


def diagnostics(ds: Dataset, harmonised: Harmonised) -> list[Problem]:
    """Curation findings as Problems for ``comparo check``, from *ds* and its harmonised
    rows: values a temperature factor took out of range (errors); duplicates, suspected unit
    slips and conflicts (warnings); the temperature policy's notes, digitized/proxy/assumed
    values, synonyms and the count of rows computed from traces (notes). The check
    against relatives on the tree is :func:`comparo.phylo.outliers.outlier_problems`."""
    h = harmonised
    rows = h.rows
    file_of = problem_file(ds, h)
    file = observations_file(ds)
    out: list[Problem] = []
    beyond = (
        (rows["status"] == "excluded")
        & (rows["problem"] == "")
        & rows["reason"].str.startswith("temperature normalisation")
    )
    for r in rows[beyond].itertuples():
        out.append(
            Problem(
                "error",
                file,
                int(r.row),
                "temperature_c",
                _cell(r.temperature_c),
                "temperature-factor-range",
                r.reason,
                "the row is excluded from every table and fit until fixed",
            )
        )
    for r in rows[rows["status"] == "merged"].itertuples():
        out.append(
            Problem(
                "warning",
                file_of(r.obs_id),
                int(r.row),
                "obs_id",
                r.obs_id,
                "duplicate-row",
                r.reason,
                "it is merged, not double counted; delete one of the two rows",
            )
        )
    for s in h.unit_slips:
        out.append(
            Problem(
                "warning",
                file_of(s["obs_id"]),
                s["row"],
                "unit",
                s["unit"],
                "unit-slip",
                f"{s['quantity']} of {s['taxon']} is ~10^{s['power']} off the group median "
                f"({s['group_median']:.3g}); likely unit {s['likely_unit']}",
                "check the unit; the value is excluded from aggregation until fixed",
            )
        )
    for c in h.conflicts:
        for i, (oid, row) in enumerate(zip(c["obs_ids"], c["rows"], strict=True)):
            others = "; ".join(describe_value(c, j) for j in range(len(c["obs_ids"])) if j != i)
            out.append(
                Problem(
                    "warning",
                    file_of(oid),
                    row,
                    "value",
                    oid,
                    "conflict",
                    f"{c['quantity']} of {c['taxon']}: {describe_value(c, i)} disagrees with "
                    f"{others}",
                    "check both sources; the per-taxon value combines them",
                )
            )
    out += _temperature_notes(ds, h, file)
    return out + _row_notes(rows, file)


def _row_notes(rows: pd.DataFrame, file: str) -> list[Problem]:
    """Notes on single rows: digitized, proxy and assumed values, synonyms mapped, and the
    count of rows computed from the traces."""
    out: list[Problem] = []
    for b in ("digitized", "proxy", "assumed"):
        for r in rows[rows["basis"] == b].itertuples():
            extra = f" (stands in from {r.proxy_taxon})" if b == "proxy" else ""
            out.append(
                Problem(
                    "note",
                    file,
                    int(r.row),
                    "basis",
                    b,
                    f"basis-{b}",
                    f"{r.quantity_key} of {r.accepted} is {b}{extra}",
                    "",
                )
            )
    syn = rows[
        (rows["accepted"] != rows["taxon"]) & (rows["_origin"] == "" if "_origin" in rows else True)
    ]
    for name, part in syn.groupby("taxon"):
        out.append(
            Problem(
                "note",
                file,
                int(part["row"].iat[0]),
                "taxon",
                name,
                "synonym",
                f"reported name mapped to accepted name {part['accepted'].iat[0]!r} "
                f"({len(part)} row(s))",
                "",
            )
        )
    n_traces = int((rows["_origin"] != "").sum()) if "_origin" in rows else 0
    if n_traces:
        out.append(
            Problem(
                "note",
                TRACE_ROWS_FILE,
                None,
                None,
                str(n_traces),
                TRACE_ROWS_RULE,
                f"{n_traces} row(s) computed from the traces (frequency, loop area, work ...) "
                f"join the {int((rows['_origin'] == '').sum())} rows of the observations table",
                "audit and the report count both",
            )
        )
    return out


TRACE_ROWS_RULE = "trace-rows"  # the note of diagnostics() counting the rows from traces
TRACE_ROWS_FILE = "traces.csv"


def _temperature_notes(ds: Dataset, h: Harmonised, file: str) -> list[Problem]:
    """Notes on the temperature policy for ``check`` (docs/methods/temperature.md): a taxon
    brought to the fallback temperature for want of an operating temperature, a
    heterotherm's in-vivo value normalised, a per-taxon value combining values that
    refer to different temperatures."""
    out: list[Problem] = []
    rows = (
        h.rows[(h.rows["status"] == "used") & (h.rows.get("temperature_rule", "") != "")]
        if "temperature_rule" in h.rows
        else h.rows.iloc[:0]
    )
    if h.policy is None or rows.empty:
        return out
    thermo, t_op, _ = thermal_columns(ds, rows["accepted"])
    normalised = rows["temperature_rule"].isin(["Q10", "Arrhenius"]).to_numpy(bool)
    if h.policy.operating:
        fb = normalised & ~np.isfinite(t_op)
        for name, part in rows[fb].groupby("accepted", sort=True):
            out.append(
                Problem(
                    "note",
                    file,
                    int(part["row"].iat[0]),
                    "taxon",
                    name,
                    "temperature-fallback",
                    f"{name} has no operating_temperature_c: its {len(part)} "
                    "temperature-sensitive value(s) are "
                    f"brought to the fallback {h.reference_temperature_c:g} °C",
                    "give operating_temperature_c in taxa.csv",
                )
            )
    prep = (
        rows["preparation"].fillna("").astype(str).to_numpy(object)
        if "preparation" in rows
        else np.full(len(rows), "", dtype=object)
    )
    het = (
        normalised
        & (thermo == "heterotherm")
        & (
            (prep == "in_vivo")
            | (
                (prep == "")
                & rows["quantity_key"]
                .map(lambda k: ds.catalog[k].kind == "frequency")
                .to_numpy(bool)
            )
        )
    )
    for r, op in zip(rows[het].itertuples(), t_op[het], strict=True):
        why = (
            "it has no operating_temperature_c"
            if not np.isfinite(op)
            else f"it was measured at {r.temperature_c:g} °C, away from its operating "
            f"temperature {op:g} °C"
        )
        out.append(
            Problem(
                "note",
                file,
                int(r.row),
                "temperature_c",
                _cell(r.temperature_c),
                "temperature-heterotherm",
                f"{r.quantity_key} of heterotherm {r.accepted} is normalised like an "
                f"ectotherm's: {why}",
                f"the tolerance is {h.policy.heterotherm_tolerance_c:g} K "
                "([temperature] heterotherm_tolerance_c)",
            )
        )
    vt = pd.to_numeric(rows["value_temp_c"], errors="coerce")
    spread = (
        pd.DataFrame({"v": vt.to_numpy(float), "row": rows["row"].to_numpy()})
        .groupby(
            [rows["accepted"].to_numpy(object), rows["quantity_key"].to_numpy(object)], sort=True
        )
        .agg(min=("v", "min"), max=("v", "max"), row=("row", "first"))
    )
    for (name, q), r in spread[(spread["max"] - spread["min"]) > 0.5].iterrows():
        out.append(
            Problem(
                "note",
                file,
                int(r["row"]),
                "temperature_c",
                f"{r['min']:g} to {r['max']:g}",
                "temperature-mixed",
                f"{q} of {name}: the per-taxon value combines values that refer to "
                f"{r['min']:g} to {r['max']:g} °C "
                f"(some kept as measured); {q}_temp_c is their mean",
                'set regulated_in_vivo = "normalise" to bring them to one temperature',
            )
        )
    return out


def _cell(v) -> str:
    return (
        ""
        if v is None or (isinstance(v, float) and not np.isfinite(v))
        else f"{v:g}"
        if isinstance(v, float)
        else str(v)
    )
