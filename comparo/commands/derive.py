"""``comparo derive DATASET``: per-taxon table plus derived time scales and ratios (CSV)."""

from __future__ import annotations

import sys


def run(args) -> int:
    from comparo.bounds import check_mc
    from comparo.config import derive_settings
    from comparo.csvsafe import to_csv
    from comparo.curate import per_taxon
    from comparo.dataset import load
    from comparo.derivation import derive
    from comparo.outputs import emit

    ds = load(args.dataset)
    table = per_taxon(ds, temperature=not args.no_temperature)
    settings = derive_settings(ds.settings)
    check_mc(args.mc, len(table), "--mc")
    out = derive(table, settings, mc=args.mc, seed=args.seed, progress=sys.stderr.isatty())
    emit(to_csv(out), args.output)
    return 0
