"""Small helpers shared by the command modules: printing, atomic writes."""

from __future__ import annotations

import json
import os
import sys
import tempfile
from pathlib import Path
from typing import IO, Any


def atomic_write_text(path: str | os.PathLike, text: str, encoding: str = "utf-8") -> None:
    """Write *text* to *path* atomically (temporary file in the same folder, then rename)."""
    atomic_write_bytes(path, text.encode(encoding))


def atomic_write_bytes(path: str | os.PathLike, data: bytes) -> None:
    """Write *data* to *path* atomically (temporary file in the same folder, then rename)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
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
    """Text to standard output, or atomically to *output* when given."""
    if output:
        atomic_write_text(output, text)
    else:
        sys.stdout.write(text)
        if text and not text.endswith("\n"):
            sys.stdout.write("\n")


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


def print_problems(problems, stream: IO[str] | None = None, limit: int = 200) -> None:
    """Problems table as one readable line each (errors first), to *stream*."""
    from comparo.errors import Problem

    stream = stream or sys.stderr
    n = len(problems)
    for i, rec in enumerate(problems.to_dict("records")):
        if i >= limit:
            stream.write(f"... and {n - limit} more problem(s); use 'comparo check --format csv' for all\n")
            break
        rec = {k: (None if _is_missing(v) else v) for k, v in rec.items()}
        stream.write(Problem(**rec).line() + "\n")


def _is_missing(v: Any) -> bool:
    try:
        import pandas as pd

        return v is None or (not isinstance(v, str) and bool(pd.isna(v)))
    except (TypeError, ValueError):
        return False
