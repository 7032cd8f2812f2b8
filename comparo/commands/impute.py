"""``comparo impute DATASET --y Q``: phylogenetic imputation of one quantity, with its
leave-one-out check."""

from __future__ import annotations

from comparo.outputs import dumps, emit


def run(args) -> int:
    from comparo.dataset import load
    from comparo.phylo.imputation import impute

    result = impute(load(args.dataset), args.y, lambda_=args.lambda_)
    if args.format == "json":
        emit(dumps(result.to_dict()), args.output)
    elif args.format == "csv":
        from comparo.csvsafe import to_csv

        emit(to_csv(result.to_frame()), args.output)
    else:
        emit(result.summary(), args.output)
    return 0
