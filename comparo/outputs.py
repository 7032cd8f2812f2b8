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
  :class:`~comparo.errors.UsageError` naming the path (exit 2), not a traceback.
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

from comparo.errors import UsageError

STDOUT_NAMES = frozenset({"-", "/dev/stdout"})
_DATASET_TABLES = ("observations.csv", "observations.tsv", "observations.xlsx")
# the inputs of the command or API call running now: (as given, resolved)
_PROTECTED: ContextVar[tuple[tuple[str, Path], ...]] = ContextVar("comparo_inputs", default=())


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


def guard_output(path: str | os.PathLike | None, *, kind: str = "file",
                 inputs: Iterable[str | os.PathLike | None] = ()) -> None:
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
    if kind == "dataset":  # a command that writes a dataset folder checks what is in it itself
        kind = "dir"
    elif kind == "dir" and out.is_dir() and any((out / t).exists() for t in _DATASET_TABLES):
        raise UsageError(f"output folder {path} holds a dataset (an observations table); "
                         "results are not written into data folders: choose another folder")
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


def resolve_output(path: str | os.PathLike, inputs: Iterable[str | os.PathLike | None] = (),
                   *, shown: str | None = None) -> Path:
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
            raise UsageError(f"output {shown}{via} is inside the input dataset folder {given}; "
                             "comparo never writes into its inputs: choose a path outside it")
        raise UsageError(f"output {shown}{via} is the input file {given}; "
                         "comparo never overwrites its inputs")
    return out


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


def _write_error(path: str | os.PathLike, exc: OSError) -> UsageError:
    reason = {errno.ENOSPC: "the device is full", errno.EROFS: "the file system is read-only",
              errno.EACCES: "permission denied", errno.EPERM: "permission denied",
              errno.EISDIR: "it is a folder", errno.ENOTDIR: "a parent is not a folder",
              errno.EDQUOT: "the disk quota is exceeded"}.get(exc.errno, exc.strerror or str(exc))
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
            with open(target, "wb") as fh:  # FIFO, device, socket: in place
                fh.write(data)
            return
        target.parent.mkdir(parents=True, exist_ok=True)
        _replace_atomically(target, data)
    except OSError as exc:
        raise _write_error(path, exc) from None


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


#: warnings (and notes) of one rule in one column printed in full; the rest are counted
PER_COLUMN = 5
_CELL = re.compile(r"^cell ([A-Z]{1,3}\d+): ")


def print_problems(problems, stream: IO[str] | None = None, limit: int = 200) -> None:
    """Problems table as one readable line each (errors first), to *stream*.

    A problem repeated word for word at several rows (a missing source id on eight rows) is
    one line naming its rows. Of the warnings and notes of one rule in one column, the first
    :data:`PER_COLUMN` are printed and the rest counted (``... and 9 more in this column``);
    every error is printed (up to *limit* lines).
    """
    from comparo.errors import Problem

    stream = stream or sys.stderr
    merged: dict[tuple, list] = {}
    cells: dict[tuple, list[tuple]] = {}
    seen: set[tuple] = set()
    for rec in problems.to_dict("records"):
        rec = {k: (None if _is_missing(v) else v) for k, v in rec.items()}
        m = _CELL.match(rec["message"] or "")
        if m:  # the same message at another cell of the column is the same problem
            rec["message"] = rec["message"][m.end():]
        key = tuple((k, v) for k, v in rec.items() if k != "row")
        place = (rec["row"], m.group(1) if m else "")
        if (key, place) not in seen:  # two values of one wide row share its cells
            seen.add((key, place))
            cells.setdefault(key, []).append(place)
            merged.setdefault(key, []).append(rec["row"])

    def place_of(rec: dict) -> tuple:
        return rec["severity"], rec["file"], rec["column"], rec["rule"]

    total: dict[tuple, int] = {}
    for key in merged:
        total[place_of(dict(key))] = total.get(place_of(dict(key)), 0) + 1
    lines: list[str] = []
    shown: dict[tuple, int] = {}
    for key, rows in merged.items():
        rec = dict(key)
        place = place_of(rec)
        shown[place] = shown.get(place, 0) + 1
        if rec["severity"] != "error" and rec["column"] and shown[place] > PER_COLUMN:
            continue
        known = [r for r in rows if r is not None]
        at = [c for _, c in cells[key] if c]
        if len(rows) > 1 and known:
            listed = row_list(known)
            head = f"{rec['severity']}: {rec['file']}"
            if at:  # the cells name their rows
                rec["message"] = f"cells {', '.join(at[:12])}{' ...' if len(at) > 12 else ''}: {rec['message']}"
                line = Problem(**rec, row=None).line()
            else:
                line = Problem(**rec, row=None).line().replace(head, f"{head}, rows {listed}", 1)
            line = line.replace(f"[{rec['rule']}]", f"({len(rows)} {'cells' if at else 'rows'}) [{rec['rule']}]", 1)
        else:
            if at:
                rec["message"] = f"cell {at[0]}: {rec['message']}"
            line = Problem(**rec, row=rows[0]).line()
        lines.append(line)
        if shown[place] == PER_COLUMN and rec["severity"] != "error" and rec["column"]:
            rest = total[place] - PER_COLUMN
            if rest > 0:
                lines.append(f"  ... and {rest} more in this column ({rec['file']}, column '{rec['column']}') [{rec['rule']}]")
    for i, line in enumerate(lines):
        if i >= limit:
            stream.write(f"... and {len(lines) - limit} more problem(s); use 'comparo check --format csv' for all\n")
            break
        stream.write(line + "\n")


def _is_missing(v: Any) -> bool:
    try:
        import pandas as pd

        return v is None or (not isinstance(v, str) and bool(pd.isna(v)))
    except (TypeError, ValueError):
        return False
