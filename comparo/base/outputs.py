"""Where results go: output-path checks and safe, atomic writes.

Every command and the report write through this module, so one set of rules
holds everywhere:

* **An output never lands in an input.** A path that is, or is inside, an input
  dataset folder (or equals an input file) is refused before any work, symlinks
  resolved (:func:`guard_output`). Each file written later is checked again at the
  moment it is written (:func:`resolve_output`, against the inputs of the enclosing
  :func:`protecting` block), so a file or subfolder inside an output folder that is a
  symbolic link to an input is refused too, not written through. A folder output that
  already holds a dataset (an ``observations`` table) is refused: results are not mixed
  into data.
* **Wrong kinds of path are refused up front**: an existing folder where a file is
  expected and the reverse, a parent that is a file, a folder that cannot be
  written (checked before the work starts, not after it).
* **Regular files are replaced atomically** (temporary file in the same folder,
  then rename), so a crash never leaves half a file. A symlink is written
  *through*: its target is replaced atomically and the link itself is kept. A
  FIFO, device or socket is written in place, never replaced by a regular file.
  ``-`` and ``/dev/stdout`` mean standard output.
* **Write failures** (full device, read-only file system, permission) become a
  :class:`~comparo.base.errors.UsageError` naming the path (exit 2), not a traceback.
"""

from __future__ import annotations

import errno
import json
import os
import re
import stat
import sys
import tempfile
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from pathlib import Path
from typing import IO, Any

from comparo.base.errors import UsageError

STDOUT_NAMES = frozenset({"-", "/dev/stdout"})
_DATASET_TABLES = ("observations.csv", "observations.tsv", "observations.xlsx")
# the inputs of the command or API call running now: (as given, resolved)
_PROTECTED: ContextVar[tuple[tuple[str, Path], ...]] = ContextVar("comparo_inputs", default=())
_TMP_EXTRA = 16  # bytes a temporary file's name adds to its target's: "." + name + ".XXXXXXXX.tmp"


def is_stdout(path: str | os.PathLike | None) -> bool:
    """True for ``-`` and ``/dev/stdout`` (standard output)."""
    return path is not None and str(path) in STDOUT_NAMES


def _resolved(path: str | os.PathLike) -> Path:
    return Path(os.path.realpath(os.path.expanduser(str(path))))


def _inside(child: Path, parent: Path) -> bool:
    return child == parent or parent in child.parents


def _nearest_existing(path: Path) -> Path:
    p = path
    while not p.exists() and p != p.parent:
        p = p.parent
    return p


def guard_output(
    path: str | os.PathLike | None,
    *,
    kind: str = "file",
    inputs: Iterable[str | os.PathLike | None] = (),
) -> None:
    """Refuse an output path before any work is done.

    Parameters
    ----------
    path : output given by the user (``None`` or ``-``: standard output, nothing to check).
    kind : ``"file"`` or ``"dir"``: what the command will write there; ``"dataset"``: a
        folder that becomes a dataset (``comparo import``; the dataset-folder rule is left
        to the command, which refuses any non-empty folder unless asked).
    inputs : the command's input paths (dataset folders, data or tree files).

    Raises
    ------
    UsageError
        Naming the path and the rule broken (exit 2).
    """
    if path is None or is_stdout(path):
        return
    raw = Path(os.path.expanduser(str(path)))
    out = resolve_output(raw, inputs, shown=str(path))
    _check_name_length(out, str(path))
    if kind == "dataset":  # a command that writes a dataset folder checks what is in it itself
        kind = "dir"
    elif kind == "dir" and out.is_dir() and any((out / t).exists() for t in _DATASET_TABLES):
        raise UsageError(
            f"output folder {path} holds a dataset (an observations table); "
            "results are not written into data folders: choose another folder"
        )
    _check_kind(raw, out, kind, str(path))


def _given_inputs(inputs: Iterable[str | os.PathLike | None]) -> tuple[tuple[str, Path], ...]:
    return tuple((str(g), _resolved(g)) for g in inputs if g and not is_stdout(g))


@contextmanager
def protecting(inputs: Iterable[str | os.PathLike | None]) -> Iterator[None]:
    """Within this block every write of this module (and :func:`resolve_output`) refuses a
    path that lands on or inside one of *inputs* (dataset folders, input files), links
    followed. Blocks nest; the inputs of the outer ones stay protected."""
    token = _PROTECTED.set(_PROTECTED.get() + _given_inputs(inputs))
    try:
        yield
    finally:
        _PROTECTED.reset(token)


def resolve_output(
    path: str | os.PathLike,
    inputs: Iterable[str | os.PathLike | None] = (),
    *,
    shown: str | None = None,
) -> Path:
    """The real place *path* names (``~`` expanded, every symbolic link followed).

    Raises
    ------
    UsageError
        When that place is one of the *inputs* or of the inputs of the enclosing
        :func:`protecting` blocks, or lies inside one of those that is a folder (exit 2).
    """
    shown = shown or str(path)
    out = _resolved(path)
    linked = out != Path(os.path.abspath(os.path.expanduser(str(path))))
    via = f" (through a symbolic link, it is {out})" if linked else ""
    for given, src in _given_inputs(inputs) + _PROTECTED.get():
        if not _inside(out, src):
            continue
        if src.is_dir():
            raise UsageError(
                f"output {shown}{via} is inside the input dataset folder {given}; "
                "comparo never writes into its inputs: choose a path outside it"
            )
        raise UsageError(
            f"output {shown}{via} is the input file {given}; comparo never overwrites its inputs"
        )
    return out


def _check_name_length(out: Path, shown: str) -> None:
    """Refuse a path with a name longer than the file system takes (ENAMETOOLONG), before
    any work. The last name needs room for the temporary file written beside it."""
    folder = out.parent
    while not os.path.isdir(folder) and folder != folder.parent:
        folder = folder.parent
    try:
        name_max = os.pathconf(folder, "PC_NAME_MAX")
        path_max = os.pathconf(folder, "PC_PATH_MAX")
    except (OSError, ValueError):  # pragma: no cover - no limits known
        return
    if len(shown) > 120:
        shown = f"{shown[:60]}...{shown[-40:]}"
    for i, part in enumerate(out.parts):
        last = i == len(out.parts) - 1
        size = len(os.fsencode(part))
        if size > name_max - (_TMP_EXTRA if last else 0):
            room = (
                f" ({name_max - _TMP_EXTRA} for an output file, which needs room for a temporary "
                f"file)"
            )
            raise UsageError(
                f"cannot write {shown}: the name {part[:30]}... is {size} bytes; this file system "
                f"takes names of at most {name_max} bytes{room if last else ''}: choose a shorter "
                f"name"
            )
    if len(os.fsencode(str(out))) + _TMP_EXTRA >= path_max:
        raise UsageError(
            f"cannot write {shown}: the path is {len(os.fsencode(str(out)))} bytes; this file "
            f"system takes paths of at most {path_max - 1 - _TMP_EXTRA} bytes for an output"
        )


def _check_kind(raw: Path, out: Path, kind: str, shown: str) -> None:
    if kind == "file":
        if out.is_dir():
            raise UsageError(f"output {shown} is a folder; give a file name")
    elif out.exists() and not out.is_dir():
        raise UsageError(f"output {shown} is a file; this command writes a folder")
    base = _nearest_existing(out if kind == "dir" else out.parent)
    if not base.is_dir():
        raise UsageError(f"cannot write {shown}: {base} is a file, not a folder")
    target_dir = out if (kind == "dir" and out.is_dir()) else base
    if kind == "file" and out.exists() and not out.is_file():
        return  # FIFO, device or socket: written in place
    if not os.access(target_dir, os.W_OK | os.X_OK):
        raise UsageError(f"cannot write {shown}: the folder {target_dir} is not writable")


def write_error(path: str | os.PathLike, exc: OSError) -> UsageError:
    """The UsageError saying why *path* could not be written (full device, read-only, permission, a
    folder)."""
    reason = {
        errno.ENOSPC: "the device is full",
        errno.EROFS: "the file system is read-only",
        errno.EACCES: "permission denied",
        errno.EPERM: "permission denied",
        errno.EISDIR: "it is a folder",
        errno.ENOTDIR: "a parent is not a folder",
        errno.EDQUOT: "the disk quota is exceeded",
        errno.ENAMETOOLONG: "the name is too long",
        errno.ENXIO: "it is a named pipe (FIFO) that no process is reading",
    }.get(exc.errno, exc.strerror or str(exc))
    return UsageError(f"cannot write {path}: {reason}")


def atomic_write_text(path: str | os.PathLike, text: str, encoding: str = "utf-8") -> None:
    """Write *text* to *path* (see :func:`atomic_write_bytes`)."""
    atomic_write_bytes(path, text.encode(encoding))


def atomic_write_bytes(path: str | os.PathLike, data: bytes) -> None:
    """Write *data* to *path*: standard output for ``-``/``/dev/stdout``; in place for a
    FIFO, device or socket; otherwise atomically (temporary file in the target's folder,
    then rename), writing through a symlink to its target. OS errors become UsageError."""
    if is_stdout(path):
        sys.stdout.flush()
        sys.stdout.buffer.write(data)
        sys.stdout.buffer.flush()
        return
    given = Path(path)
    resolve_output(given)
    target = _resolved(given) if given.is_symlink() else given
    try:
        mode = target.stat().st_mode if target.exists() else None
        if mode is not None and not stat.S_ISREG(mode):
            if stat.S_ISDIR(mode):
                raise UsageError(f"cannot write {path}: it is a folder")
            _write_in_place(target, mode, data)
            return
        target.parent.mkdir(parents=True, exist_ok=True)
        _replace_atomically(target, data)
    except OSError as exc:
        raise write_error(path, exc) from None


def _write_in_place(target: Path, mode: int, data: bytes) -> None:
    """A FIFO, device or socket is written in place. A FIFO is opened without blocking, so
    one that no process reads fails at once (ENXIO) instead of waiting for ever."""
    if not stat.S_ISFIFO(mode):
        with open(target, "wb") as fh:
            fh.write(data)
        return
    fd = os.open(target, os.O_WRONLY | os.O_NONBLOCK)
    os.set_blocking(fd, True)  # a reader is there: let a full pipe wait for it
    with os.fdopen(fd, "wb") as fh:
        fh.write(data)


def _replace_atomically(path: Path, data: bytes) -> None:
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp creates 0600; give the usual file mode
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def emit(text: str, output: str | None = None) -> None:
    """Text to standard output, or to *output* (see :func:`atomic_write_text`)."""
    if output and not is_stdout(output):
        atomic_write_text(output, text)
        return
    if text and not text.endswith("\n"):
        text += "\n"
    sys.stdout.write(text)


def dumps(obj: Any) -> str:
    """JSON with NaN/inf written as null (strict JSON)."""
    return json.dumps(_clean(obj), indent=2, ensure_ascii=False, allow_nan=False)


def _clean(obj: Any) -> Any:
    import math

    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_clean(v) for v in obj]
    if hasattr(obj, "item") and not isinstance(obj, str | bytes):
        try:
            obj = obj.item()
        except (ValueError, AttributeError):
            pass
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    try:
        import pandas as pd

        if obj is pd.NA or obj is pd.NaT:
            return None
    except ImportError:  # pragma: no cover
        pass
    return obj


def row_list(rows: list[int], most: int = 12) -> str:
    """Spreadsheet rows as a short text: runs as ranges, at most *most* items
    (``[2, 3, 4, 5, 9]`` -> ``'2-5, 9'``)."""
    runs: list[list[int]] = []
    for r in sorted(dict.fromkeys(int(x) for x in rows)):
        if runs and r == runs[-1][1] + 1:
            runs[-1][1] = r
        else:
            runs.append([r, r])
    items = [f"{a}-{b}" if b > a else str(a) for a, b in runs]
    return ", ".join(items[:most]) + (" ..." if len(items) > most else "")


#: problems of one rule in one column printed one by one; the rest are counted in one line
PER_COLUMN = 5
_CELL = re.compile(r"^cell ([A-Z]{1,3}\d+): ")


def print_problems(
    problems, stream: IO[str] | None = None, limit: int = 200, per_column: int = PER_COLUMN
) -> None:
    """Problems (a Problems table or a list of :class:`~comparo.base.errors.Problem`) as one
    readable line each (in their order), to *stream*, repeated ones summarised.

    A problem repeated word for word at several rows or cells (a missing source id on eight
    rows) is one line naming its rows or cells. Of one rule in one column, the first
    *per_column* lines are printed, and of one rule in all columns at most 4 x *per_column*;
    the rest of that rule is counted in one line after its last one (a rule broken in
    100,000 rows prints a handful of lines, not 100,000). At most *limit* lines in all;
    ``comparo check --format csv`` lists every problem.
    """
    from comparo.base.errors import Problem

    stream = stream or sys.stderr
    records = (
        problems.to_dict("records")
        if hasattr(problems, "to_dict")
        else [p.to_dict() for p in problems]
    )
    merged: dict[tuple, list] = {}
    cells: dict[tuple, list[tuple]] = {}
    seen: set[tuple] = set()
    for rec in records:
        rec = {k: (None if _is_missing(v) else v) for k, v in rec.items()}
        m = _CELL.match(rec["message"] or "")
        if m:  # the same message at another cell of the column is the same problem
            rec["message"] = rec["message"][m.end() :]
        key = tuple((k, v) for k, v in rec.items() if k != "row")
        place = (rec["row"], m.group(1) if m else "")
        if (key, place) not in seen:  # two values of one wide row share its cells
            seen.add((key, place))
            cells.setdefault(key, []).append(place)
            merged.setdefault(key, []).append(rec["row"])

    keys = list(merged)
    last = {(dict(k)["severity"], dict(k)["rule"]): i for i, k in enumerate(keys)}
    in_column: dict[tuple, int] = {}
    in_rule: dict[tuple, int] = {}
    left: dict[tuple, dict[str | None, int]] = {}
    lines: list[str] = []
    for i, key in enumerate(keys):
        rec, rows = dict(key), merged[key]
        rule = (rec["severity"], rec["rule"])
        group = (*rule, rec["file"], rec["column"])
        in_column[group] = in_column.get(group, 0) + 1
        if in_column[group] <= per_column and in_rule.get(rule, 0) < 4 * per_column:
            in_rule[rule] = in_rule.get(rule, 0) + 1
            lines.append(_problem_line(Problem, rec, rows, [c for _, c in cells[key] if c]))
        else:
            left.setdefault(rule, {}).setdefault(rec["column"], 0)
            left[rule][rec["column"]] += len(rows)
        if last[rule] == i and rule in left:
            lines.append(_more_line(rule, left.pop(rule)))
    for i, line in enumerate(lines):
        if i >= limit:
            stream.write(
                f"... and {len(lines) - limit} more line(s); "
                "use 'comparo check --format csv' for every problem\n"
            )
            break
        stream.write(line + "\n")


def _problem_line(problem_type, rec: dict, rows: list, at: list[str]) -> str:
    """One problem, or one repeated at several *rows* (cells *at*), as one line."""
    known = [r for r in rows if r is not None]
    if len(rows) > 1 and known:
        head = f"{rec['severity']}: {rec['file']}"
        if at:  # the cells name their rows
            rec["message"] = (
                f"cells {', '.join(at[:12])}{' ...' if len(at) > 12 else ''}: {rec['message']}"
            )
            line = problem_type(**rec, row=None).line()
        else:
            line = (
                problem_type(**rec, row=None)
                .line()
                .replace(head, f"{head}, rows {row_list(known)}", 1)
            )
        return line.replace(
            f"[{rec['rule']}]", f"({len(rows)} {'cells' if at else 'rows'}) [{rec['rule']}]", 1
        )
    if at:
        rec["message"] = f"cell {at[0]}: {rec['message']}"
    return problem_type(**rec, row=rows[0]).line()


def _more_line(rule: tuple[str, str], columns: dict[str | None, int]) -> str:
    n = sum(columns.values())
    named = [f"'{c}'" for c in sorted(columns, key=lambda c: -columns[c]) if c][:3]
    where = ""
    if named:
        where = f" in column{'s' if len(columns) > 1 else ''} {', '.join(named)}" + (
            ", ..." if len(columns) > 3 else ""
        )
    return f"{rule[0]}: ... and {n} more [{rule[1]}]{where} not listed one by one"


def _is_missing(v: Any) -> bool:
    try:
        import pandas as pd

        return v is None or (not isinstance(v, str) and bool(pd.isna(v)))
    except (TypeError, ValueError):
        return False
