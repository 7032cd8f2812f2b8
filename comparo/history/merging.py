"""Three-way merge of two curators' copies of a compilation: :func:`merge`.

Rows of observations (by ``obs_id``, and by content when a side changed an id, as
:func:`comparo.history.versions.row_changes` matches them), sources (by ``source_id``) and taxa (by
``taxon``) are merged cell by cell against the common base; the tree and comparo.toml are taken
whole from the side that changed them. What cannot be decided is a conflict, written to an
editable conflicts file and resolved with ``resolve``. The rules are in docs/versions.md.
Cells are merged as typed (the text of each file); nothing is converted.
"""

from __future__ import annotations

import csv
import io
import os
import shutil
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from comparo.base.errors import InputError, UsageError
from comparo.base.results import Result

#: Columns merged as one: a side that changed any of them changed the value as written.
VALUE_GROUP = ("value", "unit", "uncertainty", "uncertainty_kind")
#: The keyed tables merged, with their key column and the file written in OUT.
TABLES = (
    ("observations", "obs_id", "observations.csv"),
    ("sources", "source_id", "sources.csv"),
    ("taxa", "taxon", "taxa.csv"),
)
#: Whole files taken from one side: section -> (key in RawDataset.files, file written in OUT).
WHOLE = {"tree": ("tree", "tree.nwk"), "settings": ("settings", "comparo.toml")}
NOTE_NAME = "merge-note.csv"
#: Conflicts printed by :meth:`MergeResult.summary` (the conflicts file holds every one).
SHOWN = 25
CONFLICT_COLUMNS = ["section", "key", "column", "base", "a", "b", "take"]
ABSENT = "(absent)"
NO_BASE = "(no base)"
SIDES = ("base", "a", "b")


@dataclass(frozen=True)
class MergeResult(Result):
    """What :func:`merge` did. ``conflicts`` (each a dict of :data:`CONFLICT_COLUMNS` plus
    ``resolved``) lists every conflict met, resolved or not; ``out`` is the folder written (None
    while conflicts remain), ``conflicts_file`` the file listing them (None when none remain);
    ``note`` one record per merged item: section, key, origin, columns."""

    a: str
    b: str
    base: str | None
    out: str | None
    conflicts_file: str | None
    conflicts: tuple[dict, ...] = ()
    note: tuple[dict, ...] = ()
    unused_resolutions: tuple[str, ...] = field(default=())

    @property
    def unresolved(self) -> list[dict]:
        return [c for c in self.conflicts if not c["resolved"]]

    @property
    def exit_code(self) -> int:
        """0 when OUT was written, 2 while conflicts remain."""
        return 0 if self.out is not None else 2

    def to_dict(self) -> dict:
        return {
            "a": self.a,
            "b": self.b,
            "base": self.base,
            "out": self.out,
            "conflicts_file": self.conflicts_file,
            "conflicts": [dict(c) for c in self.conflicts],
            "unresolved": len(self.unresolved),
            "note": [dict(n) for n in self.note],
            "unused_resolutions": list(self.unused_resolutions),
        }

    def to_frame(self):
        """The merge note as a table: section, key, origin, columns."""
        import pandas as pd

        return pd.DataFrame(list(self.note), columns=["section", "key", "origin", "columns"])

    def summary(self) -> str:
        counts: dict[str, int] = {}
        for n in self.note:
            counts[n["origin"]] = counts.get(n["origin"], 0) + 1
        made = ", ".join(f"{v} {k}" for k, v in counts.items()) or "nothing"
        lines = [
            f"merge of {self.a} and {self.b}"
            + (f" (base {self.base})" if self.base else " (no base: every difference a conflict)")
        ]
        lines.append(f"  items by origin: {made}")
        for r in self.unused_resolutions:
            lines.append(f"  warning: resolution not used (no such conflict): {r}")
        if self.out is not None:
            resolved = len(self.conflicts)
            lines.append(
                f"  written: {self.out} ({resolved} conflict(s) resolved; "
                f"what came from where: {Path(self.out) / NOTE_NAME})"
            )
            return "\n".join(lines)
        left = self.unresolved
        lines.append(f"  {len(left)} conflict(s) unresolved; nothing written")
        for c in left[:SHOWN]:
            col = f" {c['column']}" if c["column"] else ""
            lines.append(
                f"    {c['section']} {c['key']}{col}: base {_short(c['base'])} | "
                f"a {_short(c['a'])} | b {_short(c['b'])}"
            )
        if len(left) > SHOWN:
            lines.append(f"    ... and {len(left) - SHOWN} more (every one in the conflicts file)")
        lines.append(f"  conflicts file: {self.conflicts_file}")
        lines.append(
            "  fill its 'take' column (a, b, base, or a value for a cell) and run again "
            "with --resolve FILE"
        )
        return "\n".join(lines)


def _short(text: str, most: int = 40) -> str:
    return repr(text if len(text) <= most else text[: most - 3] + "...")


# --------------------------------------------------------------------------- reading


def _table(raw, name: str, key: str, label: str) -> tuple[list[str], dict[str, dict[str, str]]]:
    """Columns and rows (key -> {column: text as typed}) of one raw table, in file order."""
    t = getattr(raw, name)
    if t is None:
        return [], {}
    frame = t.frame
    if key not in frame.columns:
        raise UsageError(
            f"{label}: the {name} table has no '{key}' column; merge matches rows by it"
        )
    cols = [str(c) for c in frame.columns]
    rows = {}
    for rec in frame.to_dict("records"):  # every cell is text as typed ("" when blank)
        rows[str(rec[key]).strip()] = {
            str(k): ("" if v is None else str(v)) for k, v in rec.items()
        }
    return cols, rows


def _whole(raw, key: str) -> bytes | None:
    path = raw.files.get(key)
    return None if path is None else Path(path).read_bytes()


def _id_map(base_ds, side_ds) -> dict[str, str]:
    """Side obs_id -> base obs_id for rows whose id changed but whose content did not."""
    from comparo.history.versions import row_changes

    return {
        str(c["new"]): str(c["old"])
        for c in row_changes(base_ds, side_ds)["changed"]
        if c["kind"] == "id_changed"
    }


# --------------------------------------------------------------------------- merging


def _row_text(row: dict[str, str] | None) -> str:
    if row is None:
        return ABSENT
    return "; ".join(f"{k}={v}" for k, v in row.items() if v != "")


class _Merger:
    def __init__(self, resolutions: dict[tuple[str, str, str], str], has_base: bool):
        self.resolutions = resolutions
        self.has_base = has_base
        self.used: set[tuple[str, str, str]] = set()
        self.conflicts: list[dict] = []
        self.problems: list[str] = []

    def conflict(self, section, key, column, base, a, b, *, cell: bool) -> tuple[bool, Any]:
        """Record a conflict; (True, choice) when the resolutions decide it."""
        ident = (section, key, column)
        take = self.resolutions.get(ident, "")
        self.used.add(ident)
        choice: Any = None
        if take in ("a", "b", "base"):
            if take == "base" and base is None:
                self.problems.append(
                    f"{section} {key} {column}: take 'base' but the base has no such item"
                )
            else:
                choice = take
        elif take and cell:
            choice = ("value", take)
        elif take:
            self.problems.append(
                f"{section} {key}: take {take!r} is not a, b or base "
                "(a hand value is allowed for a cell only)"
            )

        def show(v):
            return _row_text(v) if not cell else (ABSENT if v is None else v)

        self.conflicts.append(
            {
                "section": section,
                "key": key,
                "column": column,
                "base": show(base) if self.has_base else NO_BASE,
                "a": show(a),
                "b": show(b),
                "take": take,
                "resolved": choice is not None,
            }
        )
        return choice is not None, choice


def _merge_rows(m: _Merger, section: str, cols: list[str], base, a, b, has_base: bool):
    """Merged rows (key -> row) and note records for one keyed table."""
    out: dict[str, dict[str, str]] = {}
    note: list[dict] = []
    order = list(dict.fromkeys([*base, *a, *b]))
    for key in order:
        rb, ra, rbb = base.get(key), a.get(key), b.get(key)
        got = _merge_row(m, section, key, cols, rb, ra, rbb, has_base)
        if got is None:
            continue
        row, origin, detail = got
        if row is not None:
            out[key] = row
        note.append({"section": section, "key": key, "origin": origin, "columns": detail})
    return out, note


def _full(row, cols):
    return None if row is None else {c: row.get(c, "") for c in cols}


def _merge_row(m, section, key, cols, rb, ra, rbb, has_base):
    rb, ra, rbb = _full(rb, cols), _full(ra, cols), _full(rbb, cols)
    if ra == rbb:  # the same on both sides (or removed by both)
        if ra is None:
            return None if rb is None else (None, "removed by a and b", "")
        return ra, ("base" if ra == rb else "a and b"), ""
    if rb is None and has_base and (ra is None or rbb is None):  # added on one side
        return (ra or rbb), ("a" if ra is not None else "b"), "added"
    if ra is None or rbb is None:  # removed on one side (or, without base, on one side only)
        other, side = (rbb, "b") if ra is None else (ra, "a")
        gone = "b" if side == "a" else "a"
        if has_base and other == rb:
            return None, f"removed by {gone}", ""
        ok, choice = m.conflict(section, key, "", rb, ra, rbb, cell=False)
        if not ok:
            return None
        row = {"base": rb, "a": ra, "b": rbb}[choice]
        return row, "resolved", f"took {choice}"
    # present on both sides, different: cell by cell
    row, took, unresolved = {}, {}, False
    for c in cols:
        vb = rb[c] if rb is not None else None
        group = VALUE_GROUP if c in VALUE_GROUP else (c,)
        ca = rb is None or any(ra[g] != rb[g] for g in group if g in cols)
        cb = rb is None or any(rbb[g] != rb[g] for g in group if g in cols)
        if ra[c] == rbb[c]:
            row[c] = ra[c]
            if ca and cb and rb is not None and ra[c] != vb:
                took[c] = "a and b"
        elif ca and not cb:
            row[c], took[c] = ra[c], "a"
        elif cb and not ca:
            row[c], took[c] = rbb[c], "b"
        else:
            ok, choice = m.conflict(section, key, c, vb, ra[c], rbb[c], cell=True)
            if not ok:
                unresolved = True
                continue
            if isinstance(choice, tuple):
                row[c], took[c] = choice[1], "resolved (hand value)"
            else:
                row[c], took[c] = (
                    {"base": vb, "a": ra[c], "b": rbb[c]}[choice],
                    f"resolved ({choice})",
                )
    if unresolved:
        return None
    sides = {v for v in took.values()}
    origin = (
        "resolved"
        if any(v.startswith("resolved") for v in sides)
        else next(iter(sides))
        if len(sides) == 1
        else "merged"
    )
    detail = "; ".join(f"{c}:{v}" for c, v in took.items())
    return row, origin, detail


def _merge_whole(m, section, name, base, a, b, has_base):
    """The chosen bytes of a whole file (None: absent) and its note record (None: unresolved)."""
    if a == b:
        return a, ("base" if a == base else "a and b")
    if has_base and a == base:
        return b, "b"
    if has_base and b == base:
        return a, "a"

    def text(v):
        return ABSENT if v is None else v.decode("utf-8", "replace").strip()

    ok, choice = m.conflict(
        section, name, "", text(base) if has_base else None, text(a), text(b), cell=True
    )
    if not ok or isinstance(choice, tuple):
        if ok:
            m.problems.append(f"{section} {name}: take a, b or base (a whole file)")
        return None, None
    return {"base": base, "a": a, "b": b}[choice], "resolved"


# --------------------------------------------------------------------------- resolutions


def read_resolutions(path: str | os.PathLike) -> dict[tuple[str, str, str], str]:
    """The ``take`` of each conflict in a conflicts file: (section, key, column) -> take."""
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except OSError as exc:
        raise UsageError(f"cannot read the resolutions file {path}: {exc.strerror}") from None
    rows = list(csv.DictReader(io.StringIO(text)))
    need = {"section", "key", "column", "take"}
    if not rows or not need <= set(rows[0]):
        raise UsageError(
            f"{path} is not a conflicts file of comparo merge: it needs the columns "
            f"{', '.join(sorted(need))} and one row per conflict"
        )
    out = {}
    for r in rows:
        take = (r.get("take") or "").strip()
        if take.startswith("'"):  # the apostrophe a spreadsheet-safe CSV put before a formula
            take = take[1:]
        out[
            ((r["section"] or "").strip(), (r["key"] or "").strip(), (r["column"] or "").strip())
        ] = take
    return out


# --------------------------------------------------------------------------- writing


def _csv_text(cols: list[str], rows: list[dict[str, str]]) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for r in rows:
        w.writerow([r.get(c, "") for c in cols])
    return buf.getvalue()


def _conflicts_path(out: Path) -> Path:
    """Beside OUT, a name that holds no file yet (a user's file is never overwritten)."""
    stem = out.parent / f"{out.name}.conflicts"
    p, i = Path(f"{stem}.csv"), 2
    while p.exists() or p.is_symlink():
        p, i = Path(f"{stem}-{i}.csv"), i + 1
    return p


def _guard(out: Path, inputs: list) -> None:
    from comparo.base.outputs import guard_output, is_stdout

    if is_stdout(out):
        raise UsageError("merge writes a dataset folder, not standard output: give -o FOLDER")
    guard_output(out, kind="dir", inputs=inputs)
    if out.exists() and any(out.iterdir()):
        raise UsageError(
            f"output folder {out} exists and is not empty; merge writes a new "
            "folder: give a new or empty one"
        )
    for given in inputs:
        if given is not None and Path(os.path.realpath(given)).is_relative_to(
            Path(os.path.realpath(out))
        ):
            raise UsageError(f"input {given} is inside the output folder {out}; choose another")


def _placed(problems, folder: Path):
    """Problems with each file named inside *folder* (``A/observations.csv``): which of the
    datasets of a merge a problem belongs to."""
    frame = problems.copy()
    where = folder.parent if folder.is_file() else folder
    frame["file"] = [str(where / Path(str(f)).name) if f else str(folder) for f in frame["file"]]
    return frame


def _write_folder(out: Path, files: dict[str, bytes]) -> None:
    """Every file into a new temporary folder beside OUT, checked, then renamed to OUT."""
    from comparo.validation.dataset import load

    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.", dir=out.parent))
    try:
        for name, data in files.items():
            (tmp / name).write_bytes(data)
        load(tmp)  # OUT must pass comparo check
        if out.exists():
            out.rmdir()
        os.replace(tmp, out)
    except InputError as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        err = InputError(_placed(exc.problems, out))
        err.merged = True  # the merged dataset, not an input, failed the check
        raise err from None
    except OSError as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        raise UsageError(f"cannot write {out}: {exc.strerror or exc}") from None
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


# --------------------------------------------------------------------------- the merge


def merge(
    a: str | os.PathLike,
    b: str | os.PathLike,
    base: str | os.PathLike | None = None,
    *,
    out: str | os.PathLike,
    resolve: str | os.PathLike | None = None,
) -> MergeResult:
    """Merge two copies *a* and *b* (dataset folders or workbooks) of a compilation into the new
    folder *out*, three-way against *base* when given (see docs/versions.md).

    Returns a :class:`MergeResult`. While conflicts remain, *out* is not written and every
    conflict goes to a new conflicts file beside *out* (``OUT.conflicts.csv``, or
    ``OUT.conflicts-2.csv`` ... when that name is taken); fill its ``take`` column and pass it
    back as *resolve*. Raises :class:`comparo.InputError` when an input, or the merged
    dataset, does not pass ``comparo check``; :class:`comparo.base.errors.UsageError` for a bad
    output path or resolutions file. Inputs are never modified.
    """
    from comparo.base.errors import problems_frame
    from comparo.reading.folder import read_folder
    from comparo.validation.tables import folder_of, validate

    a, b, base = folder_of(a), folder_of(b), folder_of(base)
    out = Path(out)
    inputs = [p for p in (a, b, base, resolve) if p is not None]
    _guard(out, inputs)
    resolutions = read_resolutions(resolve) if resolve is not None else {}
    roles = [("a", a), ("b", b)] + ([("base", base)] if base is not None else [])
    ds, raw, problems = {}, {}, []
    for role, path in roles:  # as comparo.load reads and checks, keeping the text as typed
        try:
            raw[role] = read_folder(path)
        except InputError as exc:
            problems.append(_placed(exc.problems, Path(path)))
            continue
        ds[role], found = validate(raw[role])
        frame = problems_frame(found)
        if ds[role] is None or (frame["severity"] == "error").any():
            problems.append(_placed(frame, Path(path)))
    if problems:
        import pandas as pd

        raise InputError(pd.concat(problems, ignore_index=True))
    for role, path in roles:
        if raw[role].traces is not None:
            raise UsageError(
                f"{role} {path} has traces.csv; merge does not merge trace files "
                "yet: merge without them and copy the traces by hand"
            )
    has_base = base is not None
    m = _Merger(resolutions, has_base)
    files: dict[str, bytes] = {}
    note: list[dict] = []
    for section, key, fname in TABLES:
        cols, tables = [], {}
        for role in SIDES:
            if role not in raw:
                tables[role] = {}
                continue
            c, rows = _table(raw[role], section, key, f"{role} {dict(roles)[role]}")
            cols += [x for x in c if x not in cols]
            tables[role] = rows
        if section == "observations" and has_base:
            for role in ("a", "b"):
                remap = _id_map(ds["base"], ds[role])
                tables[role] = {remap.get(k, k): r for k, r in tables[role].items()}
        if not cols:
            continue
        rows, n = _merge_rows(m, section, cols, tables["base"], tables["a"], tables["b"], has_base)
        note += n
        if rows or any(tables.values()):
            files[fname] = _csv_text(cols, list(rows.values())).encode("utf-8")
    for section, (fkey, fname) in WHOLE.items():
        got = {r: _whole(raw[r], fkey) for r in raw}
        data, origin = _merge_whole(
            m, section, fname, got.get("base"), got["a"], got["b"], has_base
        )
        if origin is not None:
            if data is not None:
                files[fname] = data
            if data is not None or got.get("base") is not None or got["a"] or got["b"]:
                note.append({"section": section, "key": fname, "origin": origin, "columns": ""})
    if m.problems:
        raise UsageError(f"resolutions file {resolve}: " + "; ".join(m.problems))
    unused = tuple(" / ".join(k) for k in resolutions if k not in m.used)
    conflicts = tuple(m.conflicts)
    label = {k: str(v) for k, v in (("a", a), ("b", b), ("base", base))}
    if any(not c["resolved"] for c in conflicts):
        path = _conflicts_path(out)
        _write_conflicts(path, conflicts, inputs)
        return MergeResult(
            label["a"],
            label["b"],
            label["base"] if has_base else None,
            None,
            str(path),
            conflicts,
            tuple(note),
            unused,
        )
    files[NOTE_NAME] = _note_csv(note).encode("utf-8")
    _write_folder(out, files)
    return MergeResult(
        label["a"],
        label["b"],
        label["base"] if has_base else None,
        str(out),
        None,
        conflicts,
        tuple(note),
        unused,
    )


def _note_csv(note: list[dict]) -> str:
    import pandas as pd

    from comparo.base.csvsafe import to_csv

    return to_csv(pd.DataFrame(note, columns=["section", "key", "origin", "columns"]))


def _write_conflicts(path: Path, conflicts, inputs) -> None:
    import pandas as pd

    from comparo.base.csvsafe import to_csv
    from comparo.base.outputs import atomic_write_text, guard_output

    guard_output(path, kind="file", inputs=inputs)
    frame = pd.DataFrame(
        [{k: c[k] for k in CONFLICT_COLUMNS} for c in conflicts], columns=CONFLICT_COLUMNS
    )
    atomic_write_text(path, to_csv(frame))
