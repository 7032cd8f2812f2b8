"""``comparo report DATASET -o DIR [--since OLD]``: the whole analysis as one HTML report with
figures and tables."""

from __future__ import annotations

import sys


def run(args) -> int:
    """Build the report; exit 2 when validation found errors (the report then lists them)."""
    from comparo.report import build_report

    result = build_report(
        args.dataset,
        args.output,
        seed=args.seed,
        temperature=not args.no_temperature,
        progress=sys.stderr.isatty() and not getattr(args, "quiet", False),
        since=getattr(args, "since", None),
    )
    stream = sys.stdout if result.ok else sys.stderr
    print(result.summary(), file=stream)
    return 0 if result.ok else 2
