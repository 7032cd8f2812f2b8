"""``comparo compare DATA --y Y --model X1 --model X2 --model X1,X2``: candidate models of y
ranked by AICc with Akaike weights and likelihood-ratio tests of nested pairs."""

from __future__ import annotations

import sys
from types import SimpleNamespace

from comparo.base.outputs import dumps, emit


def _table(args, needed: list[str]):
    """The per-taxon table; for a dataset with a needed column not in it, the derived table
    (per-taxon columns plus the derived time scales, bounds and ratios of ``comparo derive``)."""
    from comparo.cli.commands.fit import is_dataset, read_table

    table = read_table(args.data, args.taxon_col, temperature=not args.no_temperature)
    if not is_dataset(args.data) or all(c in table.columns for c in needed):
        return table
    from comparo.derivation import derive
    from comparo.validation.dataset import load
    from comparo.validation.settings import derive_settings

    settings = derive_settings(load(args.data).settings)
    return derive(table, settings, progress=sys.stderr.isatty())


def _tree_options(args) -> dict:
    from comparo.cli.commands.fit import _pgls_options

    shim = SimpleNamespace(data=args.data, lambda_=args.lambda_, reml=False, tree=args.tree)
    opts = _pgls_options(shim)
    opts.pop("reml", None)
    return opts


def run(args) -> int:
    from comparo.base.errors import UsageError
    from comparo.fitting.comparison import _parse, compare

    if args.method != "pgls" and (args.tree is not None or args.lambda_ is not None):
        given = [f for f, v in (("--tree", args.tree), ("--lambda", args.lambda_)) if v is not None]
        raise UsageError(
            f"{', '.join(given)} applies only to --method pgls (the method here is {args.method})"
        )
    needed = [args.y, *{c for m in args.model for c in _parse(m)}] + (
        [args.factor] if args.factor else []
    )
    table = _table(args, needed)
    opts = _tree_options(args) if args.method == "pgls" else {}
    result = compare(
        table,
        args.y,
        args.model,
        factor=args.factor,
        method=args.method,
        log=args.log,
        ci=args.ci,
        taxon_col=args.taxon_col,
        linear=args.x_linear,
        **opts,
    )
    emit(dumps(result.to_dict()) if args.format == "json" else result.summary())
    return 0
