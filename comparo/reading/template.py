"""``comparo template``: an entry workbook for curators.

Sheets: ``observations`` (the documented columns in order, with drop-down lists on
quantity, unit, basis, uncertainty_kind and preparation, and number checks on
uncertainty and n), ``sources``, an optional ``taxa``, a read-only ``catalogue``
(keys, labels, canonical units, kinds, plausible ranges and where they come from)
and a read-only ``lists`` sheet the drop-downs read from. ``comparo check`` reads
the filled workbook directly (:func:`comparo.reading.folder.read_workbook`).

The drop-downs help typing; they are not the validation. Spreadsheet programs let
a pasted cell past them, so ``comparo check`` stays the gate.
"""

from __future__ import annotations

import io as _io
import os
from dataclasses import dataclass, field
from typing import Any

from comparo.base.catalog import Catalog, read_schema

MAX_ROWS = 5000  # rows of the observations sheet that carry the drop-down lists
LIST_SHEET = "lists"
CATALOGUE_SHEET = "catalogue"


@dataclass(frozen=True)
class TemplateResult:
    """What was written: the workbook path, its sheets and the length of each drop-down list."""

    path: str
    sheets: list[str]
    lists: dict[str, int] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {"path": self.path, "sheets": self.sheets, "lists": self.lists}

    def summary(self) -> str:
        lists = ", ".join(f"{k} ({n} choices)" for k, n in self.lists.items())
        return f"wrote {self.path}: sheets {', '.join(self.sheets)}; drop-down lists on {lists}"


def _columns(table: str) -> list[tuple[str, dict[str, Any]]]:
    return list(read_schema("tables.toml")[table]["columns"].items())


def choice_lists(catalog: Catalog) -> dict[str, list[str]]:
    """The drop-down choices: quantity keys (catalogue order, a dataset's own last), the
    usual units of every kind in the catalogue plus each canonical unit, and the allowed
    values of the enumerated columns (schema/tables.toml)."""
    from comparo.base import units

    kinds = list(dict.fromkeys(q.kind for q in catalog.values()))
    unit_list = units.usual_units(kinds)
    for q in catalog.values():
        shown = units.pretty(q.unit) if q.unit != "dimensionless" else "1"
        if shown not in unit_list and q.unit not in unit_list:
            unit_list.append(q.unit)
    spec = dict(_columns("observations"))
    return {
        "quantity": list(catalog),
        "unit": unit_list,
        **{c: list(spec[c]["values"]) for c in ("basis", "uncertainty_kind", "preparation")},
    }


def put(ws, row: int, column: int, value: Any):
    """Write *value* into a cell; a text is always a plain string, never a formula.

    openpyxl reads a text beginning with ``=`` as a formula; comparo writes text (labels,
    descriptions, units, keys from a dataset's comparo.toml) only as stored strings, marked
    with the quote prefix that spreadsheets show for text typed after an apostrophe, so
    that editing the cell does not turn it into a formula either. Returns the cell."""
    cell = ws.cell(row=row, column=column)
    cell.value = value
    if isinstance(value, str):
        cell.data_type = "s"
        if value[:1] in ("=", "@", "+", "-"):
            cell.quotePrefix = True
    return cell


def build_workbook(catalog: Catalog):
    """The entry workbook (an ``openpyxl.Workbook``) for *catalog*."""
    from openpyxl import Workbook
    from openpyxl.comments import Comment
    from openpyxl.styles import Font, PatternFill
    from openpyxl.utils import get_column_letter
    from openpyxl.worksheet.datavalidation import DataValidation

    wb = Workbook()
    obs = wb.active
    obs.title = "observations"
    bold, fill = Font(bold=True), PatternFill("solid", fgColor="DDEBF7")

    def header(ws, cols: list[tuple[str, dict[str, Any]]]) -> dict[str, str]:
        letters = {}
        for i, (name, spec) in enumerate(cols, start=1):
            cell = put(ws, 1, i, name)
            cell.font, cell.fill = bold, fill
            need = "required" if spec.get("required") else "optional"
            cell.comment = Comment(f"{need}: {spec.get('description', '')}", "comparo")
            ws.column_dimensions[get_column_letter(i)].width = max(12, len(name) + 4)
            letters[name] = get_column_letter(i)
        ws.freeze_panes = "A2"
        return letters

    letters = header(obs, _columns("observations"))
    lists = choice_lists(catalog)
    ls = wb.create_sheet(LIST_SHEET)
    for j, (name, values) in enumerate(lists.items(), start=1):
        put(ls, 1, j, name).font = bold
        for i, v in enumerate(values, start=2):
            put(ls, i, j, v)
        col = get_column_letter(j)
        strict = name != "unit"  # any unit pint reads is fine: the unit list only suggests
        dv = DataValidation(
            type="list",
            formula1=f"{LIST_SHEET}!${col}$2:${col}${len(values) + 1}",
            allow_blank=True,
            showErrorMessage=True,
            errorStyle="stop" if strict else "warning",
            errorTitle=f"{name}",
            error=(
                f"choose a {name} from the list (sheet '{LIST_SHEET}')"
                if strict
                else "not one of the usual units; any unit pint reads is accepted "
                "(comparo check says if not)"
            ),
            promptTitle=name,
            prompt=f"choose from the list ({len(values)} choices)",
            showInputMessage=True,
        )
        dv.add(f"{letters[name]}2:{letters[name]}{MAX_ROWS + 1}")
        obs.add_data_validation(dv)
    for name, kind, op, low in (
        ("n", "whole", "greaterThanOrEqual", 1),
        ("uncertainty", "decimal", "greaterThanOrEqual", 0),
    ):
        dv = DataValidation(
            type=kind,
            operator=op,
            formula1=str(low),
            allow_blank=True,
            showErrorMessage=True,
            error=f"{name} must be a {'whole number' if kind == 'whole' else 'number'} >= {low}",
        )
        dv.add(f"{letters[name]}2:{letters[name]}{MAX_ROWS + 1}")
        obs.add_data_validation(dv)
    header(wb.create_sheet("sources"), _columns("sources"))
    header(
        wb.create_sheet("taxa"),
        _columns("taxa")
        + [
            (
                "clade",
                {
                    "description": "a grouping column (any extra column of taxa is one); "
                    "rename or delete it"
                },
            )
        ],
    )
    _catalogue_sheet(wb.create_sheet(CATALOGUE_SHEET), catalog, bold, fill)
    wb.move_sheet(LIST_SHEET, offset=len(wb.sheetnames))
    ls.protection.sheet = True
    return wb


def _catalogue_sheet(ws, catalog: Catalog, bold, fill) -> None:
    from openpyxl.utils import get_column_letter

    cols = [
        "key",
        "label",
        "canonical unit",
        "kind",
        "plausible low",
        "plausible high",
        "range source",
        "temperature-sensitive",
        "default Q10",
        "stored as",
        "synonyms",
        "description",
        "defined in",
    ]
    for i, c in enumerate(cols, start=1):
        cell = put(ws, 1, i, c)
        cell.font, cell.fill = bold, fill
        ws.column_dimensions[get_column_letter(i)].width = (
            28 if c in ("label", "range source", "description", "synonyms") else 16
        )
    for r, q in enumerate(catalog.values(), start=2):
        row = [
            q.key,
            q.label,
            q.unit,
            q.kind,
            q.range[0] if q.range else None,
            q.range[1] if q.range else None,
            q.range_source,
            "yes" if q.temperature_sensitive else "no",
            q.q10,
            q.converts_to or "",
            "; ".join(q.synonyms),
            q.description,
            q.origin,
        ]
        for i, v in enumerate(row, start=1):
            put(ws, r, i, v)
    ws.freeze_panes = "A2"
    ws.protection.sheet = (
        True  # read-only: the catalogue is edited in schema/ or comparo.toml, not here
    )


def workbook_bytes(catalog: Catalog) -> bytes:
    buf = _io.BytesIO()
    build_workbook(catalog).save(buf)
    return buf.getvalue()


def write_template(
    path: str | os.PathLike, dataset: str | os.PathLike | None = None
) -> TemplateResult:
    """Write the entry workbook to *path* (atomically); with *dataset*, its comparo.toml
    quantities are offered too.

    Raises
    ------
    InputError
        When the dataset's comparo.toml cannot be read or defines a malformed quantity.
    UsageError
        When *path* does not end in .xlsx or cannot be written.
    """
    from pathlib import Path

    from comparo.base.catalog import load_catalog
    from comparo.base.errors import InputError, UsageError
    from comparo.base.outputs import atomic_write_bytes, is_stdout

    if is_stdout(path) or Path(path).suffix.lower() != ".xlsx":
        raise UsageError(
            f"the template is a workbook: give a file name ending in .xlsx (got {path})"
        )
    extra, toml = None, None
    if dataset is not None:
        from comparo.reading.folder import companion_file, is_workbook
        from comparo.reading.settings import SETTINGS_NAME

        if not (Path(dataset).is_dir() or is_workbook(dataset)):
            raise UsageError(f"--dataset {dataset} is not a dataset folder or workbook")
        toml = companion_file(dataset, (SETTINGS_NAME,))
        if toml is not None:
            from comparo.reading.settings import read_settings

            settings, probs = read_settings(toml)
            if any(p.severity == "error" for p in probs):
                raise InputError(probs)
            extra = (
                settings.get("quantities") if isinstance(settings.get("quantities"), dict) else None
            )
    from comparo.base.outputs import protecting

    catalog = load_catalog(extra, file=str(toml) if extra else "comparo.toml")
    with protecting([dataset]):
        atomic_write_bytes(path, workbook_bytes(catalog))
    wb_lists = choice_lists(catalog)
    return TemplateResult(
        str(path),
        ["observations", "sources", "taxa", CATALOGUE_SHEET, LIST_SHEET],
        {k: len(v) for k, v in wb_lists.items()},
    )
