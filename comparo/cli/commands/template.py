"""``comparo template -o FILE.xlsx [--dataset DS]``: an entry workbook for curators."""

from __future__ import annotations


def run(args) -> int:
    from comparo.base.errors import UsageError
    from comparo.reading.template import write_template

    if not args.output:
        raise UsageError("give the workbook to write with -o FILE.xlsx")
    print(write_template(args.output, args.dataset).summary())
    return 0
