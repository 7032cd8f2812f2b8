"""``comparo table DATASET``: the per-taxon harmonised table as CSV (or an .xlsx workbook)."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pandas as pd


def run(args) -> int:
    from comparo.curation.aggregation import column_units, per_taxon
    from comparo.validation.dataset import load

    ds = load(args.dataset)
    table = per_taxon(ds, temperature=not args.no_temperature, aggregate=args.aggregate)
    from comparo.phylo.completion import imputed_table

    table = imputed_table(table, ds, getattr(args, "impute", None))
    write_table(table, column_units(table, ds.catalog), args.output)
    return 0


def write_table(table: pd.DataFrame, units: pd.DataFrame, output: str | None) -> None:
    """Write a per-taxon table (``comparo table`` and ``comparo derive``): CSV to standard
    output; to a file, CSV with its units beside it (``NAME.units.csv``, see
    :func:`units_path`), or, for a name ending in ``.xlsx``, a workbook with the units in the
    headers. Every file is written atomically."""
    from comparo.base.csvsafe import to_csv
    from comparo.base.outputs import atomic_write_bytes, emit, guard_output, is_stdout

    if output and not is_stdout(output) and Path(output).suffix.lower() == ".xlsx":
        from comparo.report.exports import table_workbook

        atomic_write_bytes(output, table_workbook(table, units))
        return
    if output and not is_stdout(output):
        guard_output(units_path(output))  # the units file too, before the table is written
    emit(to_csv(table), output)
    if output and not is_stdout(output):
        emit(to_csv(units), str(units_path(output)))


def units_path(output: str) -> Path:
    """Where the units of a table written to *output* go: ``table.csv`` -> ``table.units.csv``.

    >>> units_path("out/table.csv").as_posix()
    'out/table.units.csv'
    """
    p = Path(output)
    return p.with_name(p.stem + ".units.csv")
