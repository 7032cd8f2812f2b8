"""``comparo table DATASET``: the per-taxon harmonised table as CSV."""

from __future__ import annotations

from comparo.outputs import emit


def run(args) -> int:
    from comparo.curate import per_taxon
    from comparo.dataset import load

    ds = load(args.dataset)
    table = per_taxon(ds, temperature=not args.no_temperature, aggregate=args.aggregate)
    from comparo.csvsafe import to_csv

    emit(to_csv(table), args.output)
    return 0
