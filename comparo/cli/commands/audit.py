"""``comparo audit DATASET``: provenance audit and row accounting."""

from __future__ import annotations

import sys

from comparo.base.outputs import dumps, emit


def run(args) -> int:
    from comparo.pipeline import audit
    from comparo.validation.dataset import load

    ds = load(args.dataset, strict=False)
    refuse_file_errors(ds)
    report = audit(ds, temperature=not args.no_temperature)
    if args.output:
        from pathlib import Path

        import pandas as pd

        from comparo.base.csvsafe import to_csv
        from comparo.base.outputs import atomic_write_text, resolve_output
        from comparo.curation.provenance import lineage

        out = Path(args.output)
        files = {
            "audit.json": dumps(report.to_dict()),
            "coverage.csv": to_csv(report.to_frame()),
            "sources.csv": to_csv(report.sources_frame()),
            "excluded.csv": to_csv(
                pd.DataFrame(report.rows_excluded, columns=["obs_id", "row", "reason"])
            ),
            "lineage.csv": to_csv(lineage(ds, temperature=not args.no_temperature)),
        }
        for name in files:  # every file checked before the first is written
            resolve_output(out / name, [args.dataset])
        for name, text in files.items():
            atomic_write_text(out / name, text)
    if args.format == "json":
        emit(dumps(report.to_dict()))
    elif args.format == "csv":
        from comparo.base.csvsafe import to_csv

        sys.stdout.write(to_csv(report.to_frame()))
    else:
        _render(report)
    errors = (ds.problems["severity"] == "error").sum() if len(ds.problems) else 0
    if errors:
        print(
            f"{errors} row-level error(s): those rows are excluded "
            "(run 'comparo check' for details)",
            file=sys.stderr,
        )
        return 2
    if args.strict and (report.conflicts or report.unit_slips):
        return 1
    return 0


def refuse_file_errors(ds) -> None:
    """Raise :class:`~comparo.InputError` for errors the audit cannot account for as
    excluded rows: anything not on a row of the observations (a taxa.csv without its
    taxon column, a sources table without source_id, bad settings, reserved names)."""
    from comparo.base.errors import InputError

    probs = ds.problems
    if probs is None or not len(probs):
        return
    obs_file = ds.files["observations"].name if "observations" in ds.files else None
    err = probs["severity"] == "error"
    on_rows = probs["file"].astype(str).str.startswith(obs_file or "\0") & probs["row"].notna()
    if (err & ~on_rows).any():
        raise InputError(probs[err & ~on_rows].reset_index(drop=True))


def _row(table, *cells) -> None:
    """Add a row of plain text: data (names, ids, reasons) never read as console markup."""
    from rich.text import Text

    table.add_row(*(Text(str(c)) for c in cells))


def _render(report) -> None:
    from rich.console import Console
    from rich.table import Table
    from rich.text import Text

    console = Console(width=None if sys.stdout.isatty() else 120)
    console.print(Text(report.summary()))
    if getattr(report, "imputed", None):
        t = Table(
            title="imputed values per quantity (the impute table of comparo.toml)",
            title_justify="left",
        )
        for c in ("quantity", "observed", "imputed", "LOO RMSE log10", "LOO coverage"):
            t.add_column(c)
        for q, v in report.imputed.items():
            if "refused" in v:
                _row(t, q, "", "", v["refused"], "")
            else:
                cov = f"{100 * v['coverage']:.1f}%"
                _row(t, q, v["n_observed"], v["n_imputed"], f"{v['rmse_log']:.3g}", cov)
        console.print(t)
    if report.rows_excluded:
        t = Table(title="excluded rows", title_justify="left")
        for c in ("obs_id", "row", "reason"):
            t.add_column(c)
        for r in report.rows_excluded:
            _row(t, r["obs_id"], r["row"], r["reason"])
        console.print(t)
    if report.conflicts:
        t = Table(title="conflicts", title_justify="left")
        for c in ("taxon", "quantity", "values", "sources"):
            t.add_column(c)
        for c in report.conflicts:
            _row(t, c["taxon"], c["quantity"], conflict_values(c), "; ".join(c["sources"]))
        console.print(t)
    t = Table(title="basis mix per quantity (share of used values)", title_justify="left")
    t.add_column("quantity")
    from comparo.validation.rows import BASIS_ORDER

    for b in BASIS_ORDER:
        t.add_column(b, justify="right")
    for q, s in report.basis_shares.items():
        _row(t, q, *[f"{100 * s[b]:.0f}%" if b in s else "" for b in BASIS_ORDER])
    console.print(t)
    from comparo.curation.provenance import TRUST_GRADES, TRUST_MEANING

    t = Table(title="trust grades per taxon", title_justify="left")
    for c in ("grade", "taxa", "meaning"):
        t.add_column(c)
    counts = {g: sum(1 for v in report.trust.values() if v == g) for g in TRUST_GRADES}
    for g in TRUST_GRADES:
        _row(t, g, counts[g], TRUST_MEANING[g])
    console.print(t)
    t = Table(title="sources", title_justify="left")
    for c in ("source_id", "values", "taxa"):
        t.add_column(c, justify="right" if c != "source_id" else "left")
    for sid, v in sorted(report.sources.items(), key=lambda kv: -kv[1]["values"]):
        _row(t, sid, v["values"], v["taxa"])
    console.print(t)


def conflict_values(c: dict) -> str:
    """The values of one conflict as ``obs_id: value unit (row, source)`` joined by '; '."""
    from comparo.curation.harmonise import describe_value

    return "; ".join(describe_value(c, i) for i in range(len(c["obs_ids"])))
