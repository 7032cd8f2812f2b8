"""``comparo diff OLD NEW``: what changed between two versions of a compilation.

Exit 0 when nothing differs, 1 when something does, 2 when a version does not load (its
problems printed as ``comparo check`` prints them, under a line naming the version).
"""

from __future__ import annotations

import sys
from dataclasses import replace

from comparo.base.outputs import dumps, emit, print_problems


def run(args) -> int:
    from comparo.base.errors import InputError
    from comparo.history.versions import diff
    from comparo.validation.dataset import load

    loaded, bad = [], False
    for role, path in (("OLD", args.old), ("NEW", args.new)):
        try:
            loaded.append(load(path))
        except InputError as exc:
            bad = True
            print(f"comparo diff: {role} version {path} has problems:", file=sys.stderr)
            print_problems(exc.problems, stream=sys.stderr)
    if bad:
        return 2
    result = diff(loaded[0], loaded[1], temperature=not args.no_temperature, seed=args.seed)
    result = replace(result, old=str(args.old), new=str(args.new))
    if args.format == "json":
        text = dumps(result.to_dict())
    elif args.format == "html":
        text = result.to_html_page()
    else:
        text = result.summary()
    emit(text, args.output)
    return 1 if result.differs else 0
