"""Helpers shared by the commands: the output helpers of :mod:`comparo.base.outputs` (kept here for code
written against the first layout), and how a per-taxon table is written (:func:`write_table`)."""

from __future__ import annotations

from comparo.base.outputs import atomic_write_bytes, atomic_write_text, dumps, emit, print_problems  # noqa: F401


def write_table(table, units, output: str | None) -> None:
    """CSV to standard output; to a file, CSV with its units beside it (``NAME.units.csv``),
    or, for a name ending in ``.xlsx``, a workbook with the units in the headers."""
    from pathlib import Path

    from comparo.base.csvsafe import to_csv
    from comparo.base.outputs import guard_output, is_stdout

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
