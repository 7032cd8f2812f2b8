"""``comparo derive DATASET``: per-taxon table plus derived time scales and ratios (CSV)."""

from __future__ import annotations

import sys


def run(args) -> int:
    from comparo.bounds import check_mc
    from comparo.config import derive_settings
    from comparo.curate import per_taxon
    from comparo.dataset import load
    from comparo.derivation import derive

    ds = load(args.dataset)
    table = per_taxon(ds, temperature=not args.no_temperature)
    settings = derive_settings(ds.settings)
    check_mc(args.mc, len(table), "--mc")
    out = derive(table, settings, mc=args.mc, seed=args.seed, progress=sys.stderr.isatty())
    from comparo.commands._common import write_table
    from comparo.curate import column_units

    write_table(out, column_units(out, ds.catalog), args.output)
    return 0
