"""``comparo units [DATASET]``: the quantity catalogue and its canonical units."""

from __future__ import annotations

import sys

from comparo.base.outputs import dumps, emit


def run(args) -> int:
    from comparo.base import units
    from comparo.base.catalog import load_catalog

    if args.dataset:
        from comparo.reading.folder import companion_file
        from comparo.reading.settings import SETTINGS_NAME, read_settings

        path = companion_file(args.dataset, (SETTINGS_NAME,))
        settings = read_settings(path)[0] if path is not None else {}
        catalog = load_catalog(settings.get("quantities"), file=str(path or SETTINGS_NAME))
    else:
        catalog = load_catalog()
    frame = catalog.to_frame()
    if args.format == "json":
        emit(dumps(frame.to_dict("records")))
        return 0
    if args.format == "csv":
        from comparo.base.csvsafe import to_csv

        sys.stdout.write(to_csv(frame))
        return 0
    header = (
        "key",
        "unit",
        "kind",
        "plausible range",
        "T-sensitive (Q10)",
        "label",
        "other names (comparo import)",
    )
    rows = []
    for q in catalog.values():
        rng = f"{q.range[0]:g} - {q.range[1]:g}" if q.range else ""
        ts = (
            f"yes ({q.q10:g})"
            if q.temperature_sensitive and q.q10
            else ("yes" if q.temperature_sensitive else "")
        )
        label = q.label + (f" -> stored as {q.converts_to}" if q.converts_to else "")
        rows.append((q.key, units.pretty(q.unit), q.kind, rng, ts, label, "; ".join(q.synonyms)))
    if not sys.stdout.isatty():  # piped or redirected: plain columns, nothing cut or wrapped
        widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
        lines = [
            "  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip()
            for r in [header, *rows]
        ]
        sys.stdout.write("\n".join(lines) + "\n")
        return 0
    from rich.console import Console
    from rich.table import Table
    from rich.text import Text

    table = Table(title="comparo quantity catalogue", title_justify="left")
    for col in header:
        table.add_column(col)
    for r in rows:
        table.add_row(*(Text(c) for c in r))  # data, never markup
    Console().print(table)
    return 0
