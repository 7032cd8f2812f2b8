"""``comparo import WIDE -o FOLDER``: a wide table (one column per trait) to a dataset folder."""

from __future__ import annotations

import sys


def run(args) -> int:
    from comparo.base.outputs import dumps, print_problems
    from comparo.curation.importing import import_wide

    res = import_wide(
        args.wide,
        args.output,
        sources=args.sources,
        map_file=args.map,
        sheet=args.sheet,
        decimal_comma=args.decimal_comma,
        overwrite=args.overwrite,
        header_row=args.header_row,
        plus_minus=args.plus_minus,
    )
    print_problems(
        res.warnings, stream=sys.stderr
    )  # repeated warnings summarised per rule and column
    if args.format == "json":
        print(dumps(res.to_dict()))
    else:
        print(res.summary())
    return 0
