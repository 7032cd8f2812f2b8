"""``comparo import``: a wide table (one row per taxon, one column per trait) to a dataset folder.

The headers are matched by :mod:`comparo.reading.sheets`; this module checks what the matching
decided (units against each quantity's kind, one taxon column, every trait with a
source, each spread paired with its trait), turns every filled cell into one
long-format observation, validates the result exactly as ``comparo check`` would
(every problem reported at the wide table's own cell, e.g. ``C7``), and writes the
folder: observations.csv, sources (copied, or stubs needing a citation), taxa.csv
when grouping columns were mapped, and import.toml with every decision made.
"""

from __future__ import annotations

import os
import shlex
import shutil
import tempfile
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from comparo.base.catalog import Catalog, load_catalog
from comparo.base.errors import InputError, Problem, UsageError
from comparo.curation.cells import PLUS_MINUS_KINDS
from comparo.curation.columns import resolve
from comparo.curation.imported import (
    column_unit_slips,
    import_toml,
    records_frame,
    sources_table,
    taxa_frame,
    validate_long,
)
from comparo.curation.long import LONG_COLUMNS, NOT_STATED, LongTable, to_long
from comparo.reading.headers import (
    Column,
    apply_map,
    map_text,
    match_headers,
    read_map,
    read_synonyms,
)
from comparo.reading.sheets import Grid, read_grid


@dataclass(frozen=True)
class ImportResult:
    """What an import wrote. Counts are cells and rows of the wide table."""

    folder: str
    rows_read: int
    observations: int
    empty_cells: int
    taxa: int
    sources: int
    stub_sources: list[str]
    columns: list[Column]
    warnings: list[Problem] = field(default_factory=list)
    files: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return {
            "folder": self.folder,
            "rows_read": self.rows_read,
            "observations": self.observations,
            "empty_cells": self.empty_cells,
            "taxa": self.taxa,
            "sources": self.sources,
            "stub_sources": self.stub_sources,
            "columns": [c.to_dict() for c in self.columns],
            "warnings": len(self.warnings),
            "files": self.files,
        }

    def summary(self) -> str:
        s = (
            f"{self.folder}: {self.observations} observation(s) from {self.rows_read} row(s) "
            f"({self.empty_cells} empty cell(s), no row), {self.taxa} taxa, {self.sources} "
            "source(s); "
            f"wrote {', '.join(self.files)}"
        )
        if self.stub_sources:
            s += f"; {len(self.stub_sources)} source(s) need a citation in sources.csv"
        return s


def map_path_for(output: str | os.PathLike) -> Path:
    """Where a suggested map file is written when headers need a decision: beside the output
    folder."""
    out = Path(os.path.abspath(os.path.expanduser(str(output))))
    return out.with_name(out.name + "-import-map.csv")


# --------------------------------------------------------------------------- the import


def header_synonyms(
    wide: Path, mapping: dict[str, dict[str, str]], catalog: Catalog, map_file: str
) -> tuple[dict[str, str], list[Problem]]:
    """The user's own header synonyms: ``[header_synonyms]`` of a comparo.toml beside the wide
    table, and the rows of role ``synonym`` in the map file (header = the name, key = a catalogue
    key or taxon/source/locator/temperature/n), which win over the file's."""
    from comparo.reading.settings import SETTINGS_NAME, read_settings

    synonyms: dict[str, str] = {}
    probs: list[Problem] = []
    toml = wide.parent / SETTINGS_NAME
    if toml.is_file():
        settings, sprobs = read_settings(toml)
        probs += [p for p in sprobs if p.severity == "error"]
        synonyms, more = read_synonyms(settings.get("header_synonyms"), catalog, SETTINGS_NAME)
        probs += more
    rows = {
        h: rec.get("key", "").strip()
        for h, rec in mapping.items()
        if rec.get("role", "").strip().lower() == "synonym"
    }
    own, more = read_synonyms(rows, catalog, map_file, where="key")
    for p in more:  # at the map row of the name (or of the target) the problem names
        h = next((h for h, k in rows.items() if p.value in (h, k)), None)
        probs.append(replace(p, row=int(mapping[h]["_row"]) if h is not None else None))
    return {**synonyms, **own}, probs


def _decide(
    grid: Grid, catalog: Catalog, map_file: Path | None, wide: Path
) -> tuple[list[Column], list[Problem]]:
    probs: list[Problem] = []
    mapping: dict[str, dict[str, str]] = {}
    if map_file is not None:
        mapping, probs = read_map(map_file)
    synonyms, more = header_synonyms(wide, mapping, catalog, map_file.name if map_file else "")
    probs += more
    columns = match_headers(grid.header, catalog, synonyms)
    if map_file is not None:
        decisions = {
            h: rec for h, rec in mapping.items() if rec.get("role", "").strip().lower() != "synonym"
        }
        columns, more = apply_map(columns, decisions, catalog, map_file.name)
        probs += more
    columns, more = resolve(grid, columns, catalog)
    return columns, probs + more


def _suggest_map(columns: list[Column], output: str) -> str:
    """Write the ready-to-edit map file beside the output; the hint naming it ('' if not written).

    An existing map file (perhaps edited by hand) is never replaced: when it holds other
    text, the suggestion goes to the first free name ``OUT-import-map-2.csv``, ``-3``, ..."""
    from comparo.base.outputs import atomic_write_text

    text = map_text(columns)
    first = path = map_path_for(output)
    for n in range(2, 1000):
        if not os.path.lexists(path):
            break
        if path.is_file() and not path.is_symlink() and _same_text(path, text):
            return (
                f"the map file {path} already holds every column's decision: fill role (and key, "
                "unit) "
                f"of the rows with an empty role, then rerun with --map {shlex.quote(str(path))}"
            )
        path = first.with_name(f"{first.stem}-{n}.csv")
    else:
        return ""
    try:
        atomic_write_text(path, text)
    except UsageError:
        return ""
    kept = f" ({first} exists and is kept as it is)" if path != first else ""
    return (
        f"a map file with every column's decision is written to {path}{kept}: fill role (and key, "
        "unit) "
        f"of the rows with an empty role, then rerun with --map {shlex.quote(str(path))}"
    )


def _same_text(path: Path, text: str) -> bool:
    try:
        return path.stat().st_size < 10_000_000 and path.read_text(encoding="utf-8") == text
    except (OSError, UnicodeDecodeError):
        return False


def import_wide(
    wide: str | os.PathLike,
    output: str | os.PathLike,
    *,
    sources: str | os.PathLike | None = None,
    map_file: str | os.PathLike | None = None,
    sheet: str | None = None,
    decimal_comma: bool = False,
    overwrite: bool = False,
    catalog: Catalog | None = None,
    header_row: int | None = None,
    plus_minus: str | None = None,
) -> ImportResult:
    """Import the wide table *wide* into a new dataset folder *output*.

    *header_row*: the row of the column headers (1-based, as a spreadsheet shows it; rows
    above are ignored); default the first non-blank row. *plus_minus*: what a ``±`` in a
    trait cell means (one of :data:`PLUS_MINUS_KINDS`); cells such as ``12.5 ± 0.3`` are then
    split into value and uncertainty; without it they are refused.

    Raises
    ------
    InputError
        With every problem (at the wide table's cells) when the table cannot be imported
        cleanly; nothing is written then, except a suggested map file beside *output* when
        headers need a decision.
    UsageError
        When *output* exists and is not empty (unless *overwrite*).
    """

    from comparo.base.outputs import is_stdout, protecting

    if is_stdout(output):
        raise UsageError(
            "comparo import writes a dataset folder: give its path with -o FOLDER (not standard "
            "output)"
        )
    with protecting([wide, sources, map_file]):
        return _import(
            Path(wide),
            Path(output),
            Path(sources) if sources else None,
            Path(map_file) if map_file else None,
            sheet,
            decimal_comma,
            overwrite,
            catalog,
            header_row,
            plus_minus,
        )


def _import(
    wide: Path,
    out: Path,
    src: Path | None,
    mp: Path | None,
    sheet: str | None,
    decimal_comma: bool,
    overwrite: bool,
    catalog: Catalog | None,
    header_row: int | None,
    plus_minus: str | None,
) -> ImportResult:
    output = str(out)
    catalog = catalog or load_catalog()
    _check_options(out, overwrite, header_row, plus_minus)
    grid, problems = read_grid(wide, sheet, decimal_comma, header_row)
    if grid is None or any(p.severity == "error" for p in problems):
        raise InputError(problems)
    columns, more = _decide(grid, catalog, mp, wide)
    if more:
        written = _suggest_map(columns, str(output))
        if written:
            more.append(Problem("note", grid.file, None, None, None, "map-file-written", written))
        raise InputError(more)
    long = to_long(grid, columns, decimal_comma, plus_minus, catalog)
    src_table, src_name, src_bytes, stubs, sprobs = sources_table(
        src, [r["source_id"] for r in long.records], grid
    )
    problems = long.problems + sprobs
    if not long.records and not problems:
        problems.append(
            Problem(
                "error",
                grid.file,
                None,
                None,
                None,
                "no-values",
                f"no trait cell holds a value ({len(grid.rows)} data row(s))",
                "fill the trait columns, one row per taxon",
            )
        )
    if problems or src_table is None:
        raise InputError(problems)
    extra = [c for c in LONG_COLUMNS[12:] if any(c in r for r in long.records)]
    obs = records_frame(long.records, list(LONG_COLUMNS[:12]) + extra)
    taxa = taxa_frame(long, columns)
    found = validate_long(long, obs, src_table, taxa, grid, out)
    found = column_unit_slips(found, long, columns, catalog, grid)  # also when errors stop it
    if any(p.severity == "error" for p in found):
        raise InputError(found)
    warnings = _warnings(found, long, grid)
    counts = {
        "rows_read": len(grid.rows),
        "observations": len(obs),
        "empty_cells": long.empty,
        "missing_word_cells": sum(len(v) for v in long.empty_words.values()),
        "taxa": int(obs["taxon"].nunique()) if len(obs) else 0,
        "sources": len(src_table),
        "stub_sources": stubs,
        "locator_not_stated": long.locator_filled,
    }
    files = {
        "observations.csv": _csv(obs),
        src_name: src_bytes if src_bytes is not None else _csv(src_table.frame),
    }
    if taxa is not None:
        files["taxa.csv"] = _csv(taxa)
    files["import.toml"] = import_toml(
        grid, wide, sheet, decimal_comma, src, columns, counts, plus_minus, [*files, "import.toml"]
    ).encode("utf-8")
    warnings += _write_folder(out, files, overwrite)
    return ImportResult(
        str(output),
        len(grid.rows),
        len(obs),
        long.empty,
        counts["taxa"],
        len(src_table),
        stubs,
        columns,
        warnings,
        list(files),
    )


def _check_options(
    out: Path, overwrite: bool, header_row: int | None, plus_minus: str | None
) -> None:
    """UsageError for an output folder that is not empty (without *overwrite*), a header row
    that is not a row number, or a ± kind comparo does not know."""
    output = str(out)
    if out.is_dir() and any(out.iterdir()) and not overwrite:
        raise UsageError(
            f"output folder {output} exists and is not empty; comparo import writes a new dataset "
            "folder: "
            "give a new folder, or --overwrite to replace the tables it writes there"
        )
    if header_row is not None and (
        isinstance(header_row, bool) or not isinstance(header_row, int) or header_row < 1
    ):
        raise UsageError(
            f"--header-row is the row number of the column headers, 1 or more (got {header_row!r})"
        )
    if plus_minus is not None and plus_minus not in PLUS_MINUS_KINDS:
        raise UsageError(
            f"--plus-minus is one of {', '.join(PLUS_MINUS_KINDS)} (got {plus_minus!r})"
        )


def _warnings(found: list[Problem], long: LongTable, grid: Grid) -> list[Problem]:
    """The warnings an import reports: validation's (the stub citations are counted in the
    summary instead), cells saying a value is missing, values without a locator."""
    warnings = [
        p for p in found if p.severity != "error" and p.rule != "citation-stub"
    ]  # the summary counts the stubs
    for header, cells in long.empty_words.items():
        warnings.append(
            Problem(
                "warning",
                grid.file,
                None,
                header,
                None,
                "missing-word",
                f"{len(cells)} cell(s) say the value is missing "
                f"({', '.join(cells[:5])}{' ...' if len(cells) > 5 else ''}); no row made",
                "nothing to do if they are missing values",
            )
        )
    if long.locator_filled:
        warnings.append(
            Problem(
                "warning",
                grid.file,
                None,
                None,
                None,
                "locator-not-stated",
                f"{long.locator_filled} value(s) without a locator: written as {NOT_STATED!r}",
                "add a Table/Figure/Page column to say where in each source the number is",
            )
        )
    return warnings


def _csv(frame) -> bytes:
    from comparo.base.csvsafe import to_csv

    return to_csv(frame).encode("utf-8")


def _write_folder(out: Path, files: dict[str, bytes], overwrite: bool) -> list[Problem]:
    """A new folder appears whole (written beside it, then renamed). Into an existing one
    (``--overwrite``) each file is replaced atomically, and the tables an earlier import
    wrote there (listed in its import.toml) that this one does not write again are removed;
    nothing else is removed. Every path is checked before the first write: none may be an
    input (:func:`comparo.base.outputs.resolve_output`), and a table of another name that no
    import wrote (``observations.xlsx`` beside the new ``observations.csv``) is refused.
    Returns notes about tables kept."""
    from comparo.base.outputs import atomic_write_bytes, resolve_output, write_error

    try:
        resolve_output(out)  # the folder itself (and, below, each file) never lands in an input
        if not os.path.lexists(out):
            out.parent.mkdir(parents=True, exist_ok=True)
            tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.", dir=out.parent))
            try:
                for name, data in files.items():
                    (tmp / name).write_bytes(data)
                os.chmod(tmp, 0o777 & ~_umask())
                os.rename(tmp, out)
            except BaseException:
                shutil.rmtree(tmp, ignore_errors=True)
                raise
            return []
        remove, kept = _earlier_tables(out, files) if overwrite else ([], [])
        for name in [*files, *remove]:
            resolve_output(out / name)
        for name, data in files.items():
            atomic_write_bytes(out / name, data)
        for name in remove:
            (out / name).unlink()
    except OSError as exc:
        raise write_error(out, exc) from None
    return [
        Problem(
            "warning",
            name,
            None,
            None,
            None,
            "table-kept",
            f"{out / name} was not written by an earlier comparo import (not in its import.toml): "
            "kept "
            "as it is, and it is part of the dataset",
            "remove it if it does not belong to the new import",
        )
        for name in kept
    ]


def _earlier_tables(out: Path, files: dict[str, bytes]) -> tuple[list[str], list[str]]:
    """(tables of an earlier import in *out* to remove, other tables kept); UsageError when a
    table that no import wrote would stand beside a new one of the same kind."""
    from comparo.reading.folder import OBSERVATION_NAMES, SOURCE_NAMES, TAXA_NAMES

    written = _written_by_earlier_import(out)
    remove, kept, clash = [], [], []
    for kind in (OBSERVATION_NAMES, SOURCE_NAMES, TAXA_NAMES):
        new = any(n in files for n in kind)
        for name in kind:
            if name in files or not (out / name).is_file():
                continue
            if name in written:
                remove.append(name)
            elif new:
                clash.append(name)
            else:
                kept.append(name)
    if clash:
        raise UsageError(
            f"output folder {out} holds {', '.join(clash)}, which no comparo import wrote there "
            "(it is not listed in an import.toml); --overwrite replaces only the tables of an "
            "earlier "
            "import: move it away, or import into a new folder"
        )
    return remove, kept


def _written_by_earlier_import(out: Path) -> set[str]:
    """The files an earlier import wrote into *out*, from its import.toml (none without one)."""
    try:
        doc = tomllib.loads((out / "import.toml").read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return set()
    if not isinstance(doc.get("input"), dict):
        return set()
    files = doc.get("output", {}).get("files") if isinstance(doc.get("output"), dict) else None
    if isinstance(files, list):
        return {str(f) for f in files}
    # import.toml of an earlier version: observations.csv, the sources table, taxa.csv if taxa
    # columns
    src = str(doc["input"].get("sources") or "")
    names = {"observations.csv", f"sources{Path(src).suffix.lower()}" if src else "sources.csv"}
    cols = doc.get("columns") if isinstance(doc.get("columns"), list) else []
    if any(isinstance(c, dict) and c.get("role") == "taxa" for c in cols):
        names.add("taxa.csv")
    return names


def _umask() -> int:
    m = os.umask(0)
    os.umask(m)
    return m
