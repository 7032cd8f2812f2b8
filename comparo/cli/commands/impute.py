"""``comparo impute DATASET --y Q``: phylogenetic imputation of one quantity, with its
leave-one-out check."""

from __future__ import annotations

import json

from comparo.base.outputs import dumps, emit


def json_text(d: dict) -> str:
    """The result's JSON as :func:`comparo.base.outputs.dumps` indents it, except that each taxon
    is one line: readable, and written by the C encoder (indented JSON of 100,000 taxa takes
    seconds in the pure-Python one). The values of ``to_dict()`` are already JSON-safe."""
    parts = []
    for key, value in d.items():
        if key == "taxa" and value:
            rows = ",\n".join(
                "    " + json.dumps(r, ensure_ascii=False, allow_nan=False) for r in value
            )
            text = f"[\n{rows}\n  ]"
        else:
            text = dumps(value).replace("\n", "\n  ")
        parts.append(f"  {json.dumps(key)}: {text}")
    return "{\n" + ",\n".join(parts) + "\n}"


def run(args) -> int:
    from comparo.phylo.imputation import impute
    from comparo.validation.dataset import load

    result = impute(
        load(args.dataset), args.y, lambda_=args.lambda_, with_=getattr(args, "with_", None)
    )
    if args.format == "json":
        emit(json_text(result.to_dict()), args.output)
    elif args.format == "csv":
        from comparo.base.csvsafe import to_csv

        emit(to_csv(result.to_frame()), args.output)
    else:
        emit(result.summary(), args.output)
    return 0
