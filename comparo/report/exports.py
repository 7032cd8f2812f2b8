"""Exports to open data standards.

* Frictionless Data Package (datapackage.json + CSV resources; Table Schema
  fields generated from schema/tables.toml and the quantity catalogue, with
  units and descriptions in the field metadata).
* Darwin Core MeasurementOrFact (one row per observation, the standard's term
  names, plus scientificName and bibliographicCitation).

Both write into a temporary folder beside the target and move the files into
place only when every file is written, so a failed export leaves existing
outputs untouched. CSV cells are neutralised against formula injection
(:mod:`comparo.base.csvsafe`).
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from comparo.base.catalog import read_schema
from comparo.base.csvsafe import to_csv
from comparo.curation.harmonise import per_taxon
from comparo.validation.dataset import Dataset

DWC_TERMS = [
    "measurementID",
    "scientificName",
    "measurementType",
    "measurementValue",
    "measurementUnit",
    "measurementAccuracy",
    "measurementMethod",
    "measurementDeterminedDate",
    "measurementRemarks",
    "bibliographicCitation",
]
_TS_TYPES = {
    "string": "string",
    "number": "number",
    "integer": "integer",
    "enum": "string",
    "id_list": "string",
}


@dataclass(frozen=True)
class ExportResult:
    """What an export wrote: the output folder and its files (relative names)."""

    standard: str
    folder: str
    files: list[str]

    def to_dict(self) -> dict[str, Any]:
        return {"standard": self.standard, "folder": self.folder, "files": self.files}

    def summary(self) -> str:
        return f"{self.standard}: wrote {', '.join(self.files)} to {self.folder}"


def _commit(tmp: Path, out: Path, inputs: list[Path]) -> list[str]:
    from comparo.base.outputs import resolve_output

    names = sorted(p.name for p in tmp.iterdir())
    for name in ["", *names]:  # every file checked before the first is moved in
        resolve_output(out / name, inputs)
    out.mkdir(parents=True, exist_ok=True)
    for name in names:
        os.replace(tmp / name, out / name)
    return names


def _staging(out: Path) -> Path:
    out.parent.mkdir(parents=True, exist_ok=True)
    return Path(tempfile.mkdtemp(prefix=f".{out.name}.", dir=out.parent))


def _obs_fields(frame: pd.DataFrame) -> list[dict[str, Any]]:
    spec = read_schema("tables.toml")["observations"]["columns"]
    extra = {
        "row": (
            "integer",
            "Row of the observation in the source spreadsheet (header = row 1).",
            None,
        ),
        "quantity_key": (
            "string",
            "Catalogue key the value is stored as (a diameter is stored as fiber_radius).",
            None,
        ),
        "value_canonical": (
            "number",
            "Value in the catalogue's canonical unit (unit_canonical).",
            None,
        ),
        "uncertainty_canonical": (
            "number",
            "Uncertainty as reported, in the canonical unit.",
            None,
        ),
        "unit_canonical": ("string", "Canonical unit of the quantity (pint syntax).", None),
        "basis_effective": (
            "string",
            "Basis after comparo's own conversions (a converted diameter is 'computed').",
            None,
        ),
    }
    fields = []
    for col in frame.columns:
        if col in spec:
            c = spec[col]
            f = {
                "name": col,
                "type": _TS_TYPES[c.get("type", "string")],
                "description": c.get("description", ""),
            }
            if c.get("type") == "enum":
                f["constraints"] = {"enum": list(c["values"])}
            if c.get("required"):
                f.setdefault("constraints", {})["required"] = True
        elif col in extra:
            t, d, _ = extra[col]
            f = {"name": col, "type": t, "description": d}
        else:
            f = {
                "name": col,
                "type": "string",
                "description": "Column carried along from the input.",
            }
        fields.append(f)
    return fields


def _observations_for_export(ds: Dataset) -> pd.DataFrame:
    obs = ds.observations.drop(columns=["problem"], errors="ignore").copy()
    if "n" in obs:
        n = pd.to_numeric(obs["n"], errors="coerce").astype(float)
        whole = n.isna() | ((n == n.round()) & (n.abs() <= 2**53 - 1))
        if bool(whole.all()):  # validation guarantees this for a strictly loaded dataset
            obs["n"] = n.astype("Int64")
    return obs


def _csv_resource(name: str, schema: dict, description: str | None = None) -> dict:
    """A tabular data resource ``NAME.csv`` (Frictionless Data Package, CSV in UTF-8)."""
    res = {
        "name": name,
        "path": f"{name}.csv",
        "profile": "tabular-data-resource",
        "format": "csv",
        "mediatype": "text/csv",
        "encoding": "utf-8",
    }
    if description is not None:
        res["description"] = description
    res["schema"] = schema
    return res


_SUFFIX_FIELDS = {  # per-taxon columns KEY_SUFFIX: type, description, unit of KEY or none
    "u": ("number", "Standard uncertainty of {key}, in {unit}.", True),
    "n": ("integer", "Number of values behind {key}.", False),
    "nsrc": ("integer", "Number of sources behind {key}.", False),
    "basis": ("string", "Weakest basis among the values behind {key}.", False),
    "obs": ("string", "';'-joined obs_ids behind {key}.", False),
}


def _per_taxon_field(col: str, cat) -> dict:
    """The Table Schema field of one column of the per-taxon table."""
    key, _, suffix = col.rpartition("_") if col not in cat else (col, "", "")
    if col in cat:
        q = cat[col]
        return {
            "name": col,
            "type": "number",
            "unit": q.unit,
            "title": q.label,
            "description": f"{q.description} Value in {q.unit}.",
        }
    if key in cat and suffix in _SUFFIX_FIELDS:
        kind, text, with_unit = _SUFFIX_FIELDS[suffix]
        unit = cat[key].unit
        f = {"name": col, "type": kind, "description": text.format(key=key, unit=unit)}
        if with_unit and unit:
            f["unit"] = unit
        return f
    if col.endswith("_temp_c") and col[: -len("_temp_c")] in cat:
        return {
            "name": col,
            "type": "number",
            "unit": "degC",
            "description": f"Temperature the value of {col[: -len('_temp_c')]} refers to "
            "(the target where normalised, else as measured).",
        }
    if col == "temperature_c":
        return {
            "name": col,
            "type": "number",
            "unit": "degC",
            "description": "Temperature the temperature-sensitive values refer to.",
        }
    return {"name": col, "type": "string"}


def to_datapackage(ds: Dataset, out_dir: str | Path, *, temperature: bool = True) -> ExportResult:
    """Write a Frictionless Data Package: observations, sources, taxa (if any) and the
    per-taxon table, each a CSV resource with a Table Schema."""
    out = Path(out_dir)
    tmp = _staging(out)
    try:
        obs = _observations_for_export(ds)
        (tmp / "observations.csv").write_text(to_csv(obs), encoding="utf-8")
        obs_text = "One reported value per row, as typed, with comparo's canonical conversion."
        obs_schema = {"fields": _obs_fields(obs), "primaryKey": ["obs_id"]}
        resources = [_csv_resource("observations", obs_schema, obs_text)]
        src = ds.sources.copy()
        (tmp / "sources.csv").write_text(to_csv(src), encoding="utf-8")
        sspec = read_schema("tables.toml")["sources"]["columns"]
        src_fields = [
            {"name": c, "type": "string", "description": sspec.get(c, {}).get("description", "")}
            for c in src.columns
        ]
        resources.append(
            _csv_resource("sources", {"fields": src_fields, "primaryKey": ["source_id"]})
        )
        if ds.taxa is not None:
            (tmp / "taxa.csv").write_text(to_csv(ds.taxa), encoding="utf-8")
            taxa_fields = [{"name": c, "type": "string"} for c in ds.taxa.columns]
            resources.append(_csv_resource("taxa", {"fields": taxa_fields}))
        tab = per_taxon(ds, temperature=temperature)
        (tmp / "per_taxon.csv").write_text(to_csv(tab), encoding="utf-8")
        fields = [_per_taxon_field(col, ds.catalog) for col in tab.columns]
        tab_text = "One row per accepted taxon, harmonised (comparo per-taxon table)."
        tab_schema = {"fields": fields, "primaryKey": ["taxon"]}
        resources.append(_csv_resource("per_taxon", tab_schema, tab_text))
        if ds.traces is not None:
            resources.append(_cycles_resource(ds, tmp, temperature))
        title = str(ds.settings.get("title") or ds.folder.name)
        package = {
            "profile": "tabular-data-package",
            "name": _slug(ds.settings.get("title") or ds.folder.name),
            "title": title,
            "description": "Compilation exported by comparo. Values keep their source "
            "(sources resource) and locator.",
            "resources": resources,
        }
        (tmp / "datapackage.json").write_text(
            json.dumps(package, indent=2, ensure_ascii=False) + "\n", encoding="utf-8"
        )
        files = _commit(tmp, out, [ds.folder])
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return ExportResult("datapackage", str(out), files)


def _cycles_resource(ds: Dataset, tmp: Path, temperature: bool) -> dict:
    """``cycles.csv``: one row per trace reduced by comparo cycles (SI units, KEY_sd = SD over
    cycles)."""
    from comparo.traces.files import SI_UNITS, cycles

    frame = cycles(ds, temperature=temperature).to_frame()
    (tmp / "cycles.csv").write_text(to_csv(frame), encoding="utf-8")
    fields = []
    for col in frame.columns:
        base = col[:-3] if col.endswith("_sd") else col
        f: dict = {
            "name": col,
            "type": "number" if pd.api.types.is_numeric_dtype(frame[col]) else "string",
        }
        if base in SI_UNITS:
            f["unit"] = SI_UNITS[base]
        fields.append(f)
    return {
        "name": "cycles",
        "path": "cycles.csv",
        "profile": "tabular-data-resource",
        "format": "csv",
        "mediatype": "text/csv",
        "encoding": "utf-8",
        "description": "One row per oscillation trace of traces.csv reduced to whole cycles "
        "(comparo cycles): means over cycles in SI units, KEY_sd the SD over cycles.",
        "schema": {"fields": fields, "primaryKey": ["trace_id"]},
    }


def _slug(text: str) -> str:
    import re

    s = re.sub(r"[^a-z0-9._-]+", "-", str(text).lower()).strip("-")
    return s or "comparo-dataset"


def dwc_frame(ds: Dataset) -> pd.DataFrame:
    """Darwin Core MeasurementOrFact rows: one per observation (values as reported), then one
    per computed result of the dataset's traces (``TRACE_ID:quantity``, see
    comparo.traces.files)."""
    from comparo.curation.harmonise import accepted_names

    obs = ds.observations
    cat = ds.catalog
    cite = dict(zip(ds.sources["source_id"], ds.sources["citation"], strict=True))
    year = dict(
        zip(
            ds.sources["source_id"],
            ds.sources.get("year", pd.Series([""] * len(ds.sources))),
            strict=True,
        )
    )

    def accuracy(r) -> str:
        if pd.isna(r.uncertainty):
            return ""
        kind = r.uncertainty_kind or "sd"
        n = f", n={int(r.n)}" if not pd.isna(r.n) else ""
        return f"{r.uncertainty!r} {r.unit} ({kind}{n})"

    def method(r) -> str:
        parts = [f"basis: {r.basis}", f"locator: {r.locator}"]
        if r.preparation:
            parts.append(f"preparation: {r.preparation}")
        if r.basis == "computed" and r.inputs:
            parts.append(f"computed from: {r.inputs}")
        if r.basis == "proxy" and r.proxy_taxon:
            parts.append(f"proxy taxon: {r.proxy_taxon}")
        return "; ".join(parts)

    def remarks(r) -> str:
        parts = []
        if not pd.isna(r.temperature_c):
            parts.append(f"measured at {r.temperature_c:g} °C")
        if r.taxon != r.accepted:
            parts.append(f"reported as {r.taxon}")
        if r.notes:
            parts.append(r.notes)
        return "; ".join(parts)

    frame = obs.assign(accepted=accepted_names(ds))
    if (
        ds.traces is not None
    ):  # the computed rows of the reduced traces (comparo cycles), with their lineage
        from comparo.curation.harmonise import harmonise

        rows = harmonise(ds).rows
        frame = pd.concat(
            [frame, rows.loc[rows["_origin"] == "traces.csv", list(frame.columns)]],
            ignore_index=True,
        )
    recs = []
    for r in frame.itertuples(index=False):
        q = cat[r.quantity] if r.quantity in cat else None
        recs.append(
            {
                "measurementID": r.obs_id,
                "scientificName": r.accepted,
                "measurementType": q.label if q else r.quantity,
                "measurementValue": repr(float(r.value)) if not pd.isna(r.value) else "",
                "measurementUnit": r.unit,
                "measurementAccuracy": accuracy(r),
                "measurementMethod": method(r),
                "measurementDeterminedDate": str(year.get(r.source_id, "") or ""),
                "measurementRemarks": remarks(r),
                "bibliographicCitation": cite.get(r.source_id, ""),
            }
        )
    return pd.DataFrame(recs, columns=DWC_TERMS)


def to_dwc(ds: Dataset, out_dir: str | Path) -> ExportResult:
    """Write ``measurementorfact.csv`` (Darwin Core MeasurementOrFact terms)."""
    out = Path(out_dir)
    tmp = _staging(out)
    try:
        (tmp / "measurementorfact.csv").write_text(to_csv(dwc_frame(ds)), encoding="utf-8")
        files = _commit(tmp, out, [ds.folder])
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return ExportResult("dwc", str(out), files)


def table_workbook(table: pd.DataFrame, units: pd.DataFrame) -> bytes:
    """A per-taxon (or derived) table as an ``.xlsx`` workbook: sheet ``table`` with one row
    per taxon and the unit in each header (``body_mass (kg)``; columns without a unit keep
    their name), and sheet ``columns`` with what each column holds
    (:func:`comparo.curation.harmonise.column_units`).
    Every text cell is stored as a plain string, never as a formula (a cell ``=1+1`` stays
    the text ``=1+1``); numbers are numbers, missing values empty cells."""
    import io
    import math

    from openpyxl import Workbook
    from openpyxl.styles import Font

    from comparo.base.units import pretty

    unit_of = dict(zip(units["column"], units["unit"], strict=True))
    wb = Workbook()
    ws = wb.active
    ws.title = "table"
    sheet_columns = wb.create_sheet("columns")

    def put(sheet, row: int, col: int, value: Any) -> None:
        cell = sheet.cell(row=row, column=col)
        if value is None or (isinstance(value, float) and math.isnan(value)) or value is pd.NA:
            return
        if isinstance(value, bool) or not isinstance(value, int | float):
            cell.value = str(value)
            cell.data_type = "s"  # a string, even when it starts with '='
        else:
            cell.value = float(value) if isinstance(value, float) else int(value)

    bold = Font(bold=True)
    for j, col in enumerate(table.columns, start=1):
        u = unit_of.get(col, "")
        put(ws, 1, j, f"{col} ({pretty(u)})" if u else str(col))
        ws.cell(row=1, column=j).font = bold
    numeric = [
        bool(unit_of.get(col, "")) for col in table.columns
    ]  # a column with a unit holds numbers
    for i, rec in enumerate(table.itertuples(index=False), start=2):
        for j, v in enumerate(rec, start=1):
            v = v.item() if hasattr(v, "item") else v
            if numeric[j - 1] and isinstance(v, str):  # taxa.csv columns are read as text
                num = pd.to_numeric(v, errors="coerce")
                v = v if pd.isna(num) else float(num)
            put(ws, i, j, v)
    ws.freeze_panes = "B2"
    for j, name in enumerate(units.columns, start=1):
        put(sheet_columns, 1, j, name)
        sheet_columns.cell(row=1, column=j).font = bold
    for i, rec in enumerate(units.itertuples(index=False), start=2):
        for j, v in enumerate(rec, start=1):
            put(sheet_columns, i, j, v)
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()
