"""``comparo derive DATASET``: per-taxon table plus derived time scales and ratios (CSV)."""

from __future__ import annotations

import sys


def run(args) -> int:
    from comparo.base.arguments import check_mc
    from comparo.curation.aggregation import per_taxon
    from comparo.derivation import derive
    from comparo.validation.dataset import load
    from comparo.validation.settings import derive_settings

    ds = load(args.dataset)
    table = per_taxon(ds, temperature=not args.no_temperature)
    from comparo.phylo.completion import imputed_table

    table = imputed_table(table, ds, getattr(args, "impute", None))
    settings = derive_settings(ds.settings)
    check_mc(args.mc, len(table), "--mc")
    out = derive(table, settings, mc=args.mc, seed=args.seed, progress=sys.stderr.isatty())
    from comparo.cli.commands.table import write_table
    from comparo.curation.aggregation import column_units

    write_table(out, column_units(out, ds.catalog), args.output)
    return 0
