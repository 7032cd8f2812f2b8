"""Metadata a table carries in ``DataFrame.attrs`` without paying for it on every column read.

pandas deep-copies ``attrs`` into every frame or column it derives from a frame (``__finalize__``),
so a per-taxon table with its temperature record in ``attrs`` copied that record thousands of
times in one report. :class:`SharedRecord` is a read-only dict that ``copy.deepcopy`` shares
instead of copying: safe because nothing changes it after it is built.

>>> import copy
>>> r = SharedRecord({"to": "25 °C"})
>>> copy.deepcopy(r) is r
True
"""

from __future__ import annotations

from typing import Any, NoReturn


class SharedRecord(dict):
    """A read-only dict shared, not copied, by ``copy.deepcopy`` (see the module docstring)."""

    def __deepcopy__(self, _memo: dict) -> SharedRecord:
        return self

    def _read_only(self, *args: Any, **kwargs: Any) -> NoReturn:
        raise TypeError("a SharedRecord is read-only: build a new one")

    __setitem__ = __delitem__ = _read_only
    clear = pop = popitem = setdefault = update = _read_only
