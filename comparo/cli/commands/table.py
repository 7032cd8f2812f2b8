"""``comparo table DATASET``: the per-taxon harmonised table as CSV (or an .xlsx workbook)."""

from __future__ import annotations

from comparo.cli.commands._common import write_table


def run(args) -> int:
    from comparo.curation.harmonise import column_units, per_taxon
    from comparo.validation.dataset import load

    ds = load(args.dataset)
    table = per_taxon(ds, temperature=not args.no_temperature, aggregate=args.aggregate)
    from comparo.phylo.completion import imputed_table

    table = imputed_table(table, ds, getattr(args, "impute", None))
    write_table(table, column_units(table, ds.catalog), args.output)
    return 0
