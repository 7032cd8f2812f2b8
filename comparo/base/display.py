"""How result objects show themselves in a notebook: a compact HTML table with a title
and notes, the way pandas and statsmodels objects display (``_repr_html_``).

Standard library only; values are escaped, so labels from a data file cannot inject markup.
"""

from __future__ import annotations

import html
from collections.abc import Iterable, Sequence
from typing import Any

from comparo.base.numbers import number


def cell(v: Any) -> str:
    """One value as table text: numbers to 5 significant digits, missing as a dash."""
    if v is None:
        return "–"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int):
        return str(v)
    try:
        float(v)
    except (TypeError, ValueError):
        return str(v)
    return number(v, 5, "–")


def html_table(
    title: str, header: Sequence[str], rows: Iterable[Sequence[Any]], notes: Iterable[str] = ()
) -> str:
    """A titled HTML table (``<div>`` with a ``<table>``) and optional note lines below it."""
    esc = html.escape
    head = "".join(f"<th>{esc(str(h))}</th>" for h in header)
    body = "".join(
        "<tr>" + "".join(f"<td>{esc(cell(v))}</td>" for v in row) + "</tr>" for row in rows
    )
    foot = "".join(f"<p style='margin:2px 0'>{esc(str(n))}</p>" for n in notes)
    return (
        f"<div class='comparo-result'><p style='margin:2px 0'><b>{esc(title)}</b></p>"
        f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>{foot}</div>"
    )


def frame_html(title: str, frame: Any, notes: Iterable[str] = (), max_rows: int = 30) -> str:
    """:func:`html_table` of a DataFrame (first *max_rows* rows; a note says how many more)."""
    notes = list(notes)
    shown = frame.head(max_rows)
    if len(frame) > max_rows:
        notes.append(f"{len(frame) - max_rows} more row(s); to_frame() has them all")
    return html_table(
        title, [str(c) for c in shown.columns], shown.itertuples(index=False, name=None), notes
    )
