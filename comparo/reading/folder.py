"""Read a dataset folder: observations (CSV/TSV/XLSX), sources (CSV or BibTeX),
optional taxa.csv, tree.nwk and comparo.toml.

Reading never modifies a file and never guesses silently: every cell is kept as
the text the user typed (validation parses numbers later and says where it
could not), spreadsheet row numbers are kept (header = row 1), and anything
that makes a file unreadable becomes a :class:`~comparo.base.errors.Problem` naming
the file, line and rule.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from comparo.base.errors import InputError, Problem, problem
from comparo.reading.bibtex import read_bibtex
from comparo.reading.newick import read_newick
from comparo.reading.settings import SETTINGS_NAME, read_settings
from comparo.reading.tables import RawTable, read_text_table
from comparo.reading.workbook import missing_sheet, read_excel_table, sheet_names

OBSERVATION_NAMES = (
    "observations.csv",
    "observations.tsv",
    "observations.txt",
    "observations.xlsx",
)
SOURCE_NAMES = ("sources.csv", "sources.tsv", "sources.bib", "sources.xlsx")
TAXA_NAMES = ("taxa.csv", "taxa.tsv", "taxa.xlsx")
TREE_NAMES = ("tree.nwk", "tree.newick", "tree.tre")
TRACES_NAMES = ("traces.csv", "traces.tsv")


@dataclass
class RawDataset:
    """Everything read from a folder before validation."""

    folder: Path
    observations: RawTable | None = None
    sources: RawTable | None = None
    taxa: RawTable | None = None
    traces: RawTable | None = (
        None  # the index of trace files (traces.csv); the files are read by comparo.traces.files
    )
    tree: Any = None
    tree_text: str | None = None
    settings: dict[str, Any] = field(default_factory=dict)
    files: dict[str, Path] = field(default_factory=dict)
    problems: list[Problem] = field(default_factory=list)


# --------------------------------------------------------------------------- folder


def unified_spellings(tables: list[RawTable]) -> list[Problem]:
    """Warnings for names typed in two Unicode forms (composed and decomposed) that
    reading made one: each names the places of every spelling."""
    wanted: set[str] = set()
    for t in tables:
        wanted.update(t.respelled)
    if not wanted:
        return []
    where: dict[str, dict[str, list[str]]] = {}
    for t in tables:
        moved = {(c, r) for sp in t.respelled.values() for places in sp.values() for c, r in places}
        for col in t.frame.columns:
            s = t.frame[col]
            for i in map(int, s.isin(list(wanted)).to_numpy().nonzero()[0]):
                v, row = s.iat[i], t.rows[i]
                typed = "composed (NFC)" if (str(col), row) not in moved else "decomposed"
                where.setdefault(v, {}).setdefault(typed, []).append(f"{t.file} row {row}")
    probs = []
    for v, forms in where.items():
        typed_as = {sp for t in tables for sp in t.respelled.get(v, {})}
        if len(forms) < 2 and len(typed_as) < 2:  # one spelling only: normalised, nothing unified
            continue
        first = next(t for t in tables if v in t.respelled)
        col, row = next(iter(next(iter(first.respelled[v].values()))))
        places = "; ".join(
            f"{form}: {', '.join(p[:3])}{' ...' if len(p) > 3 else ''}" for form, p in forms.items()
        )
        probs.append(
            problem(
                first.file,
                "unicode-unified",
                f"{v!r} is typed in two Unicode forms ({places}); read as one name",
                "nothing to do if they are the same name; retype one if they were meant to differ",
                row=row,
                column=col,
                value=v,
                severity="warning",
            )
        )
    return probs


def not_a_file(path: str | Path) -> str | None:
    """What *path* is when it exists but is not a regular file ("a folder", "a named pipe
    (FIFO)", "a device or socket"), else None. Checked with ``stat`` before any ``open``:
    opening a FIFO without a writer blocks for ever, and a device such as /dev/zero never
    ends."""
    import stat as _stat

    try:
        mode = Path(path).stat().st_mode
    except (OSError, ValueError):
        return None
    if _stat.S_ISREG(mode):
        return None
    return (
        "a folder"
        if _stat.S_ISDIR(mode)
        else "a named pipe (FIFO)"
        if _stat.S_ISFIFO(mode)
        else "a device or socket"
    )


def _first(folder: Path, names: tuple[str, ...], problems: list[Problem]) -> Path | None:
    """The first of *names* in *folder* that is a regular file. A name that exists but
    is a folder, a FIFO or device, or a symbolic link that loops or leads nowhere is a
    problem (an error), never read and never silently skipped."""
    for n in names:
        p = folder / n
        try:
            p.stat()
        except OSError as exc:
            if p.is_symlink():
                why = (
                    "a symbolic link that loops"
                    if exc.errno == 40
                    else "a symbolic link to nothing"
                )
                problems.append(
                    problem(
                        n, "not-a-file", f"{n} is {why}", "replace the link with the file itself"
                    )
                )
            elif exc.errno not in (2, 20):  # ENOENT, ENOTDIR: simply absent
                problems.append(problem(n, "file-read", f"cannot read {n} ({exc.strerror})"))
            continue
        what = not_a_file(p)
        if what is None:
            return p
        problems.append(
            problem(
                n,
                "not-a-file",
                f"{n} is {what}, not a file",
                f"put the table in a regular file named {n}",
            )
        )
    return None


WORKBOOK_SHEETS = ("observations", "sources", "taxa")


def read_table(path: Path, sheet: str) -> tuple[RawTable | None, list[Problem]]:
    """Read a table by its extension: an .xlsx/.xlsm workbook's sheet *sheet* (else its
    first sheet) by :func:`comparo.reading.workbook.read_excel_table`, anything else as
    text by :func:`comparo.reading.tables.read_text_table`."""
    if path.suffix.lower() in (".xlsx", ".xlsm"):
        return read_excel_table(path, sheet)
    return read_text_table(path)


def read_workbook(path: Path) -> RawDataset:
    """A whole dataset in one workbook (a filled entry template): sheets ``observations``
    and ``sources``, and ``taxa`` when it holds rows. Messages name the sheet and cell."""
    raw = RawDataset(folder=path)
    names, raw.problems = sheet_names(path)
    if names is None:
        return raw
    for sheet in WORKBOOK_SHEETS:
        if sheet not in names:
            if sheet != "taxa":
                hint = (
                    "a dataset workbook holds the sheets observations and sources "
                    "(comparo template writes one)"
                )
                raw.problems.append(missing_sheet(path.name, sheet, names, hint))
            continue
        table, p = read_excel_table(path, sheet)
        if (
            sheet == "taxa"
            and (table is None or len(table) == 0)
            and not any(x.severity == "error" and x.rule != "empty-file" for x in p)
        ):
            continue  # an empty optional sheet: no taxa table
        raw.problems += p
        setattr(raw, sheet, table)
        raw.files[sheet] = path
    _read_tree_and_settings(raw, path.parent)
    raw.problems += unified_spellings(
        [t for t in (raw.observations, raw.sources, raw.taxa) if t is not None]
    )
    return raw


def _read_tree_and_settings(raw: RawDataset, folder: Path) -> None:
    """The tree (tree.nwk ...) and comparo.toml of a dataset: in its folder, or beside its
    workbook."""
    tree = _first(folder, TREE_NAMES, raw.problems)
    if tree is not None:
        raw.files["tree"] = tree
        raw.tree, raw.tree_text, p = read_newick(tree)
        raw.problems += p
    settings = _first(folder, (SETTINGS_NAME,), raw.problems)
    if settings is not None:
        raw.files["settings"] = settings
        raw.settings, p = read_settings(settings)
        raw.problems += p


def is_workbook(path: str | Path) -> bool:
    """Whether *path* names a dataset workbook (an existing .xlsx/.xlsm file), not a folder."""
    path = Path(path)
    return path.is_file() and path.suffix.lower() in (".xlsx", ".xlsm")


def companion_file(dataset: str | Path, names: tuple[str, ...]) -> Path | None:
    """The first of *names* that belongs to *dataset*: inside a dataset folder, or beside a
    dataset workbook (``tree.nwk`` and ``comparo.toml`` next to ``entry.xlsx``); None if absent."""
    dataset = Path(dataset)
    folder = dataset.parent if is_workbook(dataset) else dataset
    return next((folder / n for n in names if (folder / n).is_file()), None)


def input_files(dataset: str | Path) -> list[Path]:
    """The files a dataset is read from: every regular, non-hidden file at the top of a
    dataset folder; for a workbook, the workbook and the tree and comparo.toml beside it."""
    dataset = Path(dataset)
    if is_workbook(dataset):
        extra = [companion_file(dataset, TREE_NAMES), companion_file(dataset, (SETTINGS_NAME,))]
        return [dataset] + [p for p in extra if p is not None]
    return [p for p in sorted(dataset.iterdir()) if p.is_file() and not p.name.startswith(".")]


def cell_coordinates(raw: RawDataset, problems: list[Problem]) -> list[Problem]:
    """Problems at a cell of a workbook sheet, with the cell's coordinates ('cell C7: ...')
    put before the message."""
    from dataclasses import replace

    tables = {
        t.file: t.letters
        for t in (raw.observations, raw.sources, raw.taxa)
        if t is not None and t.letters
    }
    if not tables:
        return problems
    out = []
    for p in problems:
        letter = tables.get(p.file, {}).get(p.column or "")
        if letter and p.row is not None and not p.message.startswith("cell "):
            p = replace(p, message=f"cell {letter}{p.row}: {p.message}")
        out.append(p)
    return out


def read_folder(folder: str | Path) -> RawDataset:
    """Read every file of a dataset folder (no validation of the cells yet).

    Raises
    ------
    InputError
        If the folder does not exist or is not a folder.
    """
    from comparo.base.arguments import check_path

    folder = check_path(folder, "folder")
    if not folder.exists():
        raise InputError(
            [
                problem(
                    str(folder),
                    "missing-folder",
                    "dataset folder does not exist",
                    "give the path of a folder holding observations.csv and sources.csv",
                )
            ]
        )
    if folder.is_file() and folder.suffix.lower() in (".xlsx", ".xlsm"):
        return read_workbook(folder)
    if not folder.is_dir():
        raise InputError(
            [
                problem(
                    str(folder),
                    "not-a-folder",
                    "expected a dataset folder (or a dataset workbook .xlsx), got a file",
                    "give the folder that holds observations.csv and sources.csv",
                )
            ]
        )
    raw = RawDataset(folder=folder)
    for table, names, required in (
        ("observations", OBSERVATION_NAMES, f"add one of {', '.join(OBSERVATION_NAMES)}"),
        ("sources", SOURCE_NAMES, "add sources.csv (source_id, citation, ...) or sources.bib"),
        ("taxa", TAXA_NAMES, ""),
        ("traces", TRACES_NAMES, ""),
    ):
        found = len(raw.problems)
        path = _first(folder, names, raw.problems)
        if path is None:
            if required and len(raw.problems) == found:  # absent, not refused
                raw.problems.append(
                    problem(str(folder), "missing-file", f"no {table} table", required)
                )
            continue
        raw.files[table] = path
        bib = table == "sources" and path.suffix == ".bib"
        read, p = read_bibtex(path) if bib else read_table(path, table)
        setattr(raw, table, read)
        raw.problems += p
    _read_tree_and_settings(raw, folder)
    raw.problems += unified_spellings(
        [t for t in (raw.observations, raw.sources, raw.taxa, raw.traces) if t is not None]
    )
    return raw
