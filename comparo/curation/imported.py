"""The tables an import writes (observations, sources, taxa, import.toml), validated in
memory exactly as ``comparo check`` would validate the folder."""

from __future__ import annotations

import hashlib
import math
from dataclasses import replace
from pathlib import Path
from typing import Any

from comparo.base.catalog import Catalog
from comparo.base.errors import Problem, problem
from comparo.curation.long import NOT_STATED, STUB_CITATION, LongTable
from comparo.reading.headers import (
    Column,
)
from comparo.reading.sheets import Grid

# --------------------------------------------------------------------------- validation, in memory


def records_frame(records: list[dict[str, str]], columns: list[str]):
    import pandas as pd

    return pd.DataFrame(
        [{c: r.get(c, "") for c in columns} for r in records], columns=columns
    ).astype(str)


def validate_long(
    long: LongTable, obs, sources_table, taxa, grid: Grid, folder: Path
) -> list[Problem]:
    """Validate the long tables as ``comparo check`` does; problems at the wide cells.

    Names, keys, units and ids are first read as they look
    (:func:`comparo.reading.text.clean_names`:
    no-break and zero-width spaces, direction marks), in *obs*, *taxa* and stub sources
    themselves (stub sources are made from ids so read), so the folder written holds the
    names as read."""
    from comparo.reading.folder import RawDataset
    from comparo.reading.tables import RawTable
    from comparo.reading.text import clean_names
    from comparo.validation.tables import validate

    pre = clean_names("observations.csv", obs, list(range(2, len(obs) + 2)), other_rows=False)
    if taxa is not None:  # its names come from the taxon cells named above
        clean_names("taxa.csv", taxa, list(range(2, len(taxa) + 2)))
    raw = RawDataset(folder=folder)
    raw.observations = RawTable("observations.csv", obs.copy(), list(range(2, len(obs) + 2)))
    raw.sources = sources_table
    if taxa is not None:
        raw.taxa = RawTable("taxa.csv", taxa.copy(), list(range(2, len(taxa) + 2)))
    _, problems = validate(raw)
    problems = pre + list(problems)
    out = []
    first_row = list(long.taxa_origin.values())
    for p in problems:
        if p.file == "observations.csv" and p.row is not None:
            origin = long.origin[p.row - 2]
            header, coord, row = origin.get(p.column or "", origin["value"])
            message = f"cell {coord}: {p.message}"
            typed, unit = long.typed[p.row - 2].get(p.column or "", (None, ""))
            if (
                typed is not None and p.value is not None
            ):  # show the cell as typed, not as converted
                if not _same_number(typed, p.value):
                    message += f" (typed {typed} {unit}, read as {p.value} °C)"
                p = replace(p, value=typed)
            out.append(replace(p, file=grid.file, row=row, column=header, message=message))
        elif p.file == "taxa.csv" and p.row is not None and p.row - 2 < len(first_row):
            out.append(
                replace(p, file=grid.file, row=first_row[p.row - 2], message=f"taxa: {p.message}")
            )
        else:
            out.append(p)
    # a cell shared by several long rows (a temperature, a source) breaks a rule once, not
    # once per row
    return list(dict.fromkeys(out))


def _same_number(a: str, b: str) -> bool:
    try:
        return float(a) == float(b)
    except ValueError:
        return a == b


def column_unit_slips(
    found: list[Problem], long: LongTable, columns: list[Column], catalog: Catalog, grid: Grid
) -> list[Problem]:
    """A whole column in the wrong unit is one warning for the column, not one per cell.

    When at least two, and at least half, of a trait column's values are outside the
    quantity's plausible range as read in the header's unit, and another usual unit of the
    kind (``units.USUAL_UNITS``) puts at least 80% of them inside it (and more than the
    header's unit does), the column's out-of-range warnings are replaced by one naming that
    unit. The values are imported as the header says; the curator decides."""
    from comparo.base import units

    by_col: dict[str, list[Problem]] = {}
    for p in found:
        if p.rule == "out-of-range" and p.file == grid.file and p.column:
            by_col.setdefault(p.column, []).append(p)
    replaced: set[str] = set()
    extra: list[Problem] = []
    for c in columns:
        bad = by_col.get(c.header, [])
        q = catalog[c.key] if c.role == "value" and c.key in catalog else None
        if q is None or not q.range or len(bad) < 2:
            continue
        values = [
            float(r["value"])
            for r, o in zip(long.records, long.origin, strict=True)
            if o["value"][0] == c.header
        ]
        if 2 * len(bad) < len(values):
            continue
        lo, hi = q.range
        own = units.conversion_factor(c.unit, q.unit)
        best, best_in = "", len(values) - len(bad)
        for u in units.USUAL_UNITS.get(q.kind, ()):
            try:
                f = units.conversion_factor(u, q.unit)
            except Exception:  # a usual unit of another dimension (never for a catalogue kind)
                continue
            if math.isclose(f, own, rel_tol=1e-9):
                continue
            inside = sum(lo <= v * f <= hi for v in values)
            if inside > best_in:
                best, best_in = u, inside
        if not best or best_in < 0.8 * len(values):
            continue
        replaced.add(c.header)
        canon = units.pretty(q.unit)
        extra.append(
            Problem(
                "warning",
                grid.file,
                grid.header_row,
                c.header,
                c.unit,
                "column-unit",
                f"header in column {c.letter}: {len(bad)} of {len(values)} values of {q.key} are "
                "outside its plausible range "
                f"({lo:g}-{hi:g} {canon}) read in {c.unit}; read in {best}, {best_in} of them are "
                f"inside: is the column's unit {best}?",
                f"if so, write ({best}) in the header (or the unit in the map file) and import "
                f"again; they were imported in {c.unit}",
            )
        )
    return [p for p in found if not (p.rule == "out-of-range" and p.column in replaced)] + extra


# --------------------------------------------------------------------------- sources, taxa,
# import.toml


def sources_table(sources: Path | None, ids: list[str], grid: Grid):
    """(RawTable, file name to write, bytes or None for stubs, stub ids, problems)."""
    import pandas as pd

    from comparo.reading.bibtex import read_bibtex
    from comparo.reading.folder import read_table
    from comparo.reading.tables import RawTable

    if sources is None:
        from comparo.reading.text import visible

        stubs = sorted({visible(i) for i in ids if i})  # ids as read (see _validate)
        frame = pd.DataFrame(
            {
                "source_id": stubs,
                "citation": [STUB_CITATION.format(sid=s, file=grid.file) for s in stubs],
                "year": "",
                "doi": "",
                "url": "",
                "notes": "stub written by comparo import",
            }
        ).astype(str)
        return (
            RawTable("sources.csv", frame, list(range(2, len(frame) + 2))),
            "sources.csv",
            None,
            stubs,
            [],
        )
    if not sources.is_file():
        missing = "the sources file does not exist or is not a file"
        return None, "", None, [], [problem(str(sources), "missing-file", missing)]
    ext = sources.suffix.lower()
    if ext not in (".csv", ".tsv", ".bib", ".xlsx"):
        wrong = "a sources file is .csv, .tsv, .bib or .xlsx"
        return None, "", None, [], [problem(sources.name, "file-format", wrong)]
    table, probs = read_bibtex(sources) if ext == ".bib" else read_table(sources, "sources")
    return table, f"sources{ext}", sources.read_bytes(), [], probs


def taxa_frame(long: LongTable, columns: list[Column]):
    import pandas as pd

    keys = [c.key for c in columns if c.role == "taxa"]
    if not keys or not long.taxa:
        return None
    names = list(dict.fromkeys(r["taxon"] for r in long.records))
    names += [t for t in long.taxa if t not in names]
    return pd.DataFrame(
        [{"taxon": t, **{k: long.taxa.get(t, {}).get(k, "") for k in keys}} for t in names],
        columns=["taxon", *keys],
    ).astype(str)


def _toml_value(v: Any) -> str:
    import json

    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(v)
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return json.dumps(str(v), ensure_ascii=False)


def import_toml(
    grid: Grid,
    wide: Path,
    sheet: str | None,
    decimal_comma: bool,
    sources: Path | None,
    columns: list[Column],
    counts: dict[str, Any],
    plus_minus: str | None = None,
    written: list[str] | None = None,
) -> str:
    """import.toml: the input (name, sheet, SHA-256), the options, the files written (the only
    ones a later ``--overwrite`` import may remove), the counts, and per column the decision
    taken (role, key, unit, basis and how the header was matched)."""
    from comparo.base.version import __version__

    lines = [
        "# Written by 'comparo import': every decision that turned the wide table into this "
        "folder.",
        "# Rerun the same import with:  comparo import WIDE -o NEW_FOLDER --map import.toml",
        "# (edit role/key/unit/basis of a [[columns]] entry to change a decision).",
        f"comparo_version = {_toml_value(__version__)}",
        "",
        "[input]",
        f"file = {_toml_value(wide.name)}",
        f"sheet = {_toml_value(sheet or '')}",
        f"sha256 = {_toml_value(hashlib.sha256(wide.read_bytes()).hexdigest())}",
        f"decimal_comma = {_toml_value(decimal_comma)}",
        f"delimiter = {_toml_value(grid.delimiter)}",
        f"header_row = {grid.header_row}",
        f"plus_minus = {_toml_value(plus_minus or '')}",
        f"sources = {_toml_value(sources.name if sources else '')}",
        "",
        "[output]",
        f"files = {_toml_value(list(written or []))}",
        "",
        "[defaults]",
        'basis = "reported"',
        f"locator = {_toml_value(NOT_STATED)}",
        'obs_id = "imp_ + first 10 hex digits of '
        'SHA-256(taxon|source|locator|header|muscle|occurrence)"',
        "",
        "[counts]",
    ]
    lines += [f"{k} = {_toml_value(v)}" for k, v in counts.items()]
    for c in columns:
        lines += ["", "[[columns]]"] + [f"{k} = {_toml_value(v)}" for k, v in c.to_dict().items()]
    return "\n".join(lines) + "\n"
