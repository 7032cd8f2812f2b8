"""``comparo check DATASET``: validate and list every problem."""

from __future__ import annotations

import sys

from comparo.base.outputs import dumps, emit, row_list


def _text(v) -> str:
    import pandas as pd

    return "" if v is None or (not isinstance(v, str) and pd.isna(v)) else str(v)


def _merged(part) -> list[dict]:
    """Problems that differ only in their row (a missing source id on eight rows) as one
    record with the list of its rows, in the order of their first row."""
    out: dict[tuple, dict] = {}
    for rec in part.to_dict("records"):
        key = tuple((k, _text(v)) for k, v in rec.items() if k != "row")
        if key not in out:
            out[key] = {**rec, "rows": []}
        if _text(rec["row"]):
            out[key]["rows"].append(int(rec["row"]))
    return list(out.values())


def render_problems(result, limit: int | None = 25) -> None:
    """Rich table of problems grouped by severity, then the one-line summary.

    Every text from the data goes in as :class:`rich.text.Text`, never as markup,
    so a cell holding ``[/red]`` prints as typed.

    A problem repeated word for word on several rows is one line naming its rows. At
    most *limit* lines per (severity, rule) are printed, followed by a line saying how
    many more problems there are; ``None`` prints every line. The full list is
    always in ``--format csv`` and ``--format json``.
    """
    from rich.console import Console
    from rich.table import Table
    from rich.text import Text

    console = Console(soft_wrap=False, width=None if sys.stdout.isatty() else 140)
    frame = result.problems
    for severity, style in (("error", "bold red"), ("warning", "yellow"), ("note", "cyan")):
        part = frame[frame["severity"] == severity]
        if part.empty:
            continue
        total = len(part)
        hidden: dict[str, int] = {}
        shown: list[dict] = []
        per_rule: dict[str, int] = {}
        for rec in _merged(part):  # the same problem on many rows is one line, and counts once
            rule = _text(rec["rule"])
            per_rule[rule] = per_rule.get(rule, 0) + 1
            if limit is not None and per_rule[rule] > limit:
                hidden[rule] = hidden.get(rule, 0) + max(1, len(rec["rows"]))
            else:
                shown.append(rec)
        table = Table(
            title=f"{total} {severity}(s)",
            title_style=style,
            title_justify="left",
            header_style="bold",
            expand=False,
        )
        table.add_column("where", no_wrap=True)
        table.add_column("column", no_wrap=True)
        table.add_column("value", max_width=28, overflow="ellipsis", no_wrap=True)
        table.add_column("problem", overflow="fold")
        for rec in shown:
            rows = rec["rows"]
            where = _text(rec["file"]) + (f":{row_list(rows)}" if rows else "")
            problem = Text(
                _text(rec["message"]) + (f" ({len(rows)} rows)" if len(rows) > 1 else "")
            )
            problem.append(f"  [{_text(rec['rule'])}]", style="dim")
            if _text(rec["hint"]):
                problem.append("\n" + _text(rec["hint"]), style="italic cyan")
            table.add_row(
                Text(where), Text(_text(rec["column"])), Text(_text(rec["value"])), problem
            )
        console.print(table)
        for rule, count in hidden.items():
            console.print(
                Text(
                    f"  ... and {count} more {severity}(s) [{rule}] not shown "
                    "(--all lists every row; --format csv writes them all)",
                    style="dim",
                )
            )
    console.print(Text(result.summary(), style="bold green" if result.ok else "bold red"))


def run(args) -> int:
    from comparo.pipeline import check

    result = check(args.dataset)  # the same gate as comparo.check
    if args.format == "json":
        emit(dumps(result.to_dict()))
    elif args.format == "csv":
        from comparo.base.csvsafe import to_csv

        sys.stdout.write(to_csv(result.problems))
    else:
        render_problems(result, limit=None if args.all else 25)
    if not result.ok:
        return 2
    if args.strict and result.n_warnings:
        return 1
    return 0
