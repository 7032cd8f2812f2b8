"""Exceptions the user can act on, and the Problems table they carry.

A *problem* is one broken rule at one place: file, spreadsheet row, column,
value, the rule's id, a message and a hint on how to fix it, and a severity
(``error`` stops the analysis, ``warning`` does not).
"""

from __future__ import annotations

import os
from dataclasses import asdict, dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

#: Whether each new :class:`Problem` checks that its rule id is in :mod:`comparo.base.rules`
#: (on while Python runs with assertions and the environment variable ``COMPARO_CHECK_RULES``
#: is set, as the tests do; off in normal use, where it would cost a lookup per problem).
CHECK_RULES = __debug__ and bool(os.environ.get("COMPARO_CHECK_RULES"))

PROBLEM_COLUMNS = ["severity", "file", "row", "column", "value", "rule", "message", "hint"]


@dataclass(frozen=True)
class Problem:
    """One broken rule at one place.

    ``row`` is the row number as a spreadsheet shows it (the header is row 1,
    the first data row is row 2); ``None`` when the problem is about a whole
    file or column.
    """

    severity: str  # "error" (stops the analysis) | "warning" | "note" (information)
    file: str
    row: int | None
    column: str | None
    value: str | None
    rule: str
    message: str
    hint: str = ""

    def __post_init__(self) -> None:
        if CHECK_RULES:
            from comparo.base.rules import is_registered

            assert is_registered(self.rule), f"rule id {self.rule!r} is not in comparo.base.rules"

    def to_dict(self) -> dict:
        return asdict(self)

    def line(self) -> str:
        """One-line description: ``file:row [column=value] message (rule)``."""
        where = self.file
        if self.row is not None:
            where += f", row {self.row}"
        if self.column:
            where += f", column '{self.column}'"
        if self.value not in (None, ""):
            where += f", value {self.value!r}"
        text = f"{self.severity}: {where}: {self.message} [{self.rule}]"
        if self.hint:
            text += f" Hint: {self.hint}"
        return text


def problem(
    file: str,
    rule: str,
    message: str,
    hint: str = "",
    row: int | None = None,
    column: str | None = None,
    value: str | None = None,
    severity: str = "error",
) -> Problem:
    """A :class:`Problem` by keyword: *file*, *rule*, *message* and *hint* first, the place
    (*row*, *column*, *value*) and *severity* (default ``error``) as needed."""
    return Problem(severity, file, row, column, value, rule, message, hint)


def problems_frame(problems: list[Problem]) -> pd.DataFrame:
    """Problems as a DataFrame with the columns of :data:`PROBLEM_COLUMNS`, sorted
    errors first, then by file and row."""
    import pandas as pd

    frame = pd.DataFrame(
        [
            (p.severity, p.file, p.row, p.column, p.value, p.rule, p.message, p.hint)
            for p in problems
        ],
        columns=PROBLEM_COLUMNS,
    )
    if frame.empty:
        return frame
    frame["row"] = frame["row"].astype("Int64")
    order = frame["severity"].map({"error": 0, "warning": 1, "note": 2}).fillna(3)
    frame = frame.assign(_o=order).sort_values(["_o", "file", "row"], kind="stable")
    return frame.drop(columns="_o").reset_index(drop=True)


def problems_from_frame(frame: pd.DataFrame) -> list[Problem]:
    """The inverse of :func:`problems_frame` (missing cells become None)."""
    import pandas as pd

    out = []
    for rec in frame.to_dict("records"):
        clean = {k: (None if not isinstance(v, str) and pd.isna(v) else v) for k, v in rec.items()}
        if clean.get("row") is not None:
            clean["row"] = int(clean["row"])
        out.append(Problem(**clean))
    return out


class ComparoError(Exception):
    """Base class of comparo's own exceptions."""


class InputError(ComparoError):
    """Bad input: the dataset (or a file in it) breaks one or more rules.

    Attributes
    ----------
    problems : pandas.DataFrame
        Every problem found, one per row, columns :data:`PROBLEM_COLUMNS`.
    """

    def __init__(self, problems: list[Problem] | pd.DataFrame, message: str | None = None):
        import pandas as pd

        if not isinstance(problems, pd.DataFrame):
            problems = problems_frame(list(problems))
        self.problems = problems
        if message is None:
            errors = problems[problems["severity"] == "error"]
            shown = errors if len(errors) else problems
            first = shown.iloc[0] if len(shown) else None
            message = f"{len(errors)} error(s) in the input"
            if first is not None:
                message += "; first: " + Problem(**first.to_dict()).line()
        super().__init__(message)


class UsageError(ComparoError):
    """The request itself is wrong (unknown column, bad option value)."""
