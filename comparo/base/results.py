"""One shape for every result object: ``summary()``, ``to_dict()``, ``to_frame()`` and
``_repr_html_()`` (docs/api.md, "Results").

:class:`Result` is the base (mixin) every public result class derives from: a class writes
``to_dict()`` (the JSON contract of its command, docs/cli.md) and usually its own
``summary()`` and ``to_frame()``; what it leaves out comes from here, built on ``to_dict()``.
:class:`ResultLike` is the same four methods as a :class:`typing.Protocol`, for type checking
code that takes any result.

Standard library only; pandas is imported when a frame is asked for.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Protocol, runtime_checkable

from comparo.base.display import frame_html, html_table
from comparo.base.jsonsafe import json_safe

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["Result", "ResultLike", "scalar_lines"]


@runtime_checkable
class ResultLike(Protocol):
    """What every comparo result offers (docs/api.md)."""

    def summary(self) -> str:
        """Plain text for people."""
        ...

    def to_dict(self) -> dict:
        """JSON-safe dict: text keys, no NaN or infinity (``json.dumps(..., allow_nan=False)``)."""
        ...

    def to_frame(self) -> pd.DataFrame:
        """The result's main table as a pandas DataFrame."""
        ...

    def _repr_html_(self) -> str:
        """The notebook display: a titled HTML table."""
        ...


def scalar_lines(d: dict, indent: str = "  ") -> list[str]:
    """``key: value`` lines of the plain (text, number, boolean, None) entries of *d*."""
    return [
        f"{indent}{k}: {v}" for k, v in d.items() if v is None or isinstance(v, str | int | float)
    ]


class Result:
    """Base of the result classes: the four methods of :class:`ResultLike`.

    A subclass must define :meth:`to_dict`; the defaults of the three others read it:
    :meth:`summary` is the class name and the plain entries, :meth:`to_frame` one row of
    the entries with nested dicts spread into ``outer.inner`` columns
    (:func:`pandas.json_normalize`), and :meth:`_repr_html_` the frame under the first line
    of the summary (:func:`comparo.base.display.frame_html`).
    """

    __slots__ = ()

    def to_dict(self) -> dict:
        """JSON-safe dict (subclasses define it)."""
        raise NotImplementedError(f"{type(self).__name__} does not define to_dict()")

    def summary(self) -> str:
        """Plain text: the class name, then one line per plain entry of :meth:`to_dict`."""
        return "\n".join([type(self).__name__, *scalar_lines(self.to_dict())])

    def to_frame(self) -> pd.DataFrame:
        """One row holding the entries of :meth:`to_dict` (nested dicts as ``a.b`` columns)."""
        import pandas as pd

        return pd.json_normalize(json_safe(self.to_dict()), max_level=1)

    def _repr_html_(self) -> str:
        """Notebook display: :meth:`to_frame` under the first line of :meth:`summary`."""
        lines = self.summary().splitlines() or [type(self).__name__]
        frame = self.to_frame()
        if len(frame.columns) == 0:
            return html_table(lines[0], ["summary"], [[line.strip()] for line in lines[1:]])
        return frame_html(lines[0], frame)
