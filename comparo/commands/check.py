"""``comparo check DATASET``: validate and list every problem."""

from __future__ import annotations

import sys

from comparo.commands._common import dumps, emit


def _text(v) -> str:
    import pandas as pd

    return "" if v is None or (not isinstance(v, str) and pd.isna(v)) else str(v)


def render_problems(result) -> None:
    """Rich table of problems grouped by severity, then the one-line summary."""
    from rich.console import Console
    from rich.table import Table
    from rich.text import Text

    console = Console(soft_wrap=False, width=None if sys.stdout.isatty() else 140)
    frame = result.problems
    for severity, style in (("error", "bold red"), ("warning", "yellow"), ("note", "cyan")):
        part = frame[frame["severity"] == severity]
        if part.empty:
            continue
        table = Table(title=f"{len(part)} {severity}(s)", title_style=style, title_justify="left", header_style="bold", expand=False)
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
            table.add_row(where, _text(rec["column"]), _text(rec["value"]), problem)
        console.print(table)
    console.print(result.summary(), style="bold green" if result.ok else "bold red")


def run(args) -> int:
    from comparo.curate import review

    result = review(args.dataset)
    if args.format == "json":
        emit(dumps(result.to_dict()))
    elif args.format == "csv":
        from comparo.csvsafe import to_csv

        sys.stdout.write(to_csv(result.problems))
    else:
        render_problems(result)
    if not result.ok:
        return 2
    if args.strict and result.n_warnings:
        return 1
    return 0
