"""``comparo merge A B [--base BASE] -o OUT [--resolve FILE]``: two copies of a dataset merged.

Exit 0 when OUT was written, 2 while conflicts remain (listed, and written to a conflicts file
beside OUT), when an input does not load or when the merged dataset would not pass check
(problems printed as ``comparo check`` prints them; nothing written).
"""

from __future__ import annotations

import sys


def run(args) -> int:
    from comparo.base.errors import InputError
    from comparo.base.outputs import print_problems
    from comparo.history.merging import merge

    try:
        result = merge(args.a, args.b, args.base, out=args.output, resolve=args.resolve)
    except InputError as exc:
        what = (
            "the merged dataset would not pass check"
            if getattr(exc, "merged", False)
            else "an input does not pass check"
        )
        print(f"comparo merge: {args.output} not written: {what}:", file=sys.stderr)
        print_problems(exc.problems, stream=sys.stderr)
        return 2
    stream = sys.stdout if result.exit_code == 0 else sys.stderr
    print(result.summary(), file=stream)
    return result.exit_code
