"""``comparo export DATASET --to datapackage|dwc -o DIR``."""

from __future__ import annotations


def run(args) -> int:
    from comparo.report.exports import to_datapackage, to_dwc
    from comparo.validation.dataset import load

    ds = load(args.dataset)
    result = (
        to_datapackage(ds, args.output) if args.to == "datapackage" else to_dwc(ds, args.output)
    )
    print(result.summary())
    return 0
