"""``comparo table DATASET``: the per-taxon harmonised table as CSV (or an .xlsx workbook), and
:func:`write_table`, how a per-taxon table is written (``comparo derive`` writes one too)."""

from __future__ import annotations


def run(args) -> int:
    from comparo.curation.harmonise import column_units, per_taxon
    from comparo.validation.dataset import load

    ds = load(args.dataset)
    table = per_taxon(ds, temperature=not args.no_temperature, aggregate=args.aggregate)
    write_table(table, column_units(table, ds.catalog), args.output)
    return 0


def write_table(table, units, output: str | None) -> None:
    """CSV to standard output; to a file, CSV with its units beside it (``NAME.units.csv``),
    or, for a name ending in ``.xlsx``, a workbook with the units in the headers."""
    from pathlib import Path

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


def units_path(output: str):
    """Where the units of a table written to *output* go: ``table.csv`` -> ``table.units.csv``."""
    from pathlib import Path

    p = Path(output)
    return p.with_name(p.stem + ".units.csv")
