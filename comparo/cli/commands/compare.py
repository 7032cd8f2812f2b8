"""``comparo compare DATA --y Y --model X1 --model X2 --model X1,X2``: candidate models of y
ranked by AICc with Akaike weights and likelihood-ratio tests of nested pairs."""

from __future__ import annotations

from comparo.base.outputs import dumps, emit
from comparo.cli.inputs import derived_table, tree_options


def run(args) -> int:
    from comparo.base.errors import UsageError
    from comparo.fitting.comparison import compare, parse_model

    if args.method != "pgls" and (args.tree is not None or args.lambda_ is not None):
        given = [f for f, v in (("--tree", args.tree), ("--lambda", args.lambda_)) if v is not None]
        raise UsageError(
            f"{', '.join(given)} applies only to --method pgls (the method here is {args.method})"
        )
    needed = [args.y, *{c for m in args.model for c in parse_model(m)}] + (
        [args.factor] if args.factor else []
    )
    table = derived_table(args, needed)
    opts = tree_options(args) if args.method == "pgls" else {}
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
