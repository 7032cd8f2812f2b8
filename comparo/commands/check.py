"""``comparo check DATASET``: validate and list every problem."""

from __future__ import annotations

import sys

from comparo.outputs import dumps, emit


def _text(v) -> str:
    import pandas as pd

    return "" if v is None or (not isinstance(v, str) and pd.isna(v)) else str(v)


def render_problems(result, limit: int | None = 25) -> None:
    """Rich table of problems grouped by severity, then the one-line summary.

    Every text from the data goes in as :class:`rich.text.Text`, never as markup,
    so a cell holding ``[/red]`` prints as typed.

    At most *limit* rows per (severity, rule) are printed, followed by a line
    saying how many more there are; ``None`` prints every row. The full list is
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
        if limit is not None:
            rank = part.groupby("rule", sort=False, dropna=False).cumcount()
            over = part[rank >= limit]
            hidden = over["rule"].fillna("").value_counts(sort=False).to_dict()
            part = part[rank < limit]
        table = Table(title=f"{total} {severity}(s)", title_style=style, title_justify="left", header_style="bold", expand=False)
        table.add_column("where", no_wrap=True)
        table.add_column("column", no_wrap=True)
        table.add_column("value", max_width=28, overflow="ellipsis", no_wrap=True)
        table.add_column("problem", overflow="fold")
        for rec in part.to_dict("records"):
            where = _text(rec["file"]) + (f":{_text(rec['row'])}" if _text(rec["row"]) else "")
            problem = Text(_text(rec["message"]))
            problem.append(f"  [{_text(rec['rule'])}]", style="dim")
            if _text(rec["hint"]):
                problem.append("\n" + _text(rec["hint"]), style="italic cyan")
            table.add_row(Text(where), Text(_text(rec["column"])), Text(_text(rec["value"])), problem)
        console.print(table)
        for rule, count in hidden.items():
            console.print(Text(f"  ... and {count} more {severity}(s) [{rule}] not shown "
                               "(--all lists every row; --format csv writes them all)", style="dim"))
    console.print(Text(result.summary(), style="bold green" if result.ok else "bold red"))


def run(args) -> int:
    from comparo.curate import review

    result = review(args.dataset)
    if args.format == "json":
        emit(dumps(result.to_dict()))
    elif args.format == "csv":
        from comparo.csvsafe import to_csv

        sys.stdout.write(to_csv(result.problems))
    else:
        render_problems(result, limit=None if args.all else 25)
    if not result.ok:
        return 2
    if args.strict and result.n_warnings:
        return 1
    return 0
