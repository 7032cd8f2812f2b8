"""``comparo fit`` with several ``--x`` (or ``--factor``): the multiple regression of
:func:`comparo.fitting.multiple_fit`. With one ``--x`` the options keep their one-line meaning."""

from __future__ import annotations

import sys

from comparo.base.errors import UsageError
from comparo.base.outputs import dumps, emit

# options of the one-predictor fit that the multiple regression does not offer (yet)
_LINE_ONLY = (
    ("--by", "by", None),
    ("--bootstrap", "bootstrap", 0),
    ("--breakpoint", "breakpoint", False),
    ("--drop-flagged", "drop_flagged", None),
    ("--reml", "reml", False),
    ("--tip-se", "tip_se", False),
)


def one_x(args) -> bool:
    """True for a one-line fit (one --x, no --factor): ``args.x`` becomes that name and
    ``args.against`` one number (or None). False for the multiple regression."""
    xs = args.x if isinstance(args.x, list) else [args.x]
    if len(xs) > 1 or getattr(args, "factor", None):
        return False
    args.x = xs[0]
    given = (
        args.against
        if isinstance(args.against, list)
        else ([] if args.against is None else [args.against])
    )
    if len(given) > 1:
        raise UsageError(
            f"--against is given {len(given)} times; with one --x it takes one value (the exponent)"
        )
    if given:
        args.against = _value(given[0], args.x)
    else:
        args.against = None
    return True


def _value(text, x: str) -> float:
    text = str(text)
    if "=" in text:
        name, _, text = text.partition("=")
        if name.strip() != x:
            raise UsageError(
                f"--against {name.strip()}=...: {name.strip()!r} is not the predictor ({x!r})"
            )
    try:
        return float(text)
    except ValueError:
        raise UsageError(f"--against must be a number (got {text!r})") from None


def _against(given: list[str] | None) -> dict[str, float] | None:
    if not given:
        return None
    out: dict[str, float] = {}
    for item in given:
        name, eq, value = str(item).partition("=")
        if not eq or not name.strip():
            raise UsageError(
                f"--against {item!r}: with several --x each test is TERM=VALUE "
                "(e.g. --against body_mass=-0.25)"
            )
        try:
            out[name.strip()] = float(value)
        except ValueError:
            raise UsageError(f"--against {item!r}: {value!r} is not a number") from None
    return out


def run_multiple(args) -> int:
    """The multiple regression as text, JSON or CSV (the terms table)."""
    from comparo.cli.commands.compare import _table, _tree_options
    from comparo.fitting.multiple import FIT_METHODS, _check, multiple_fit

    xs = list(dict.fromkeys(args.x))
    if len(xs) < len(args.x):
        raise UsageError("an --x is given twice")
    _check(
        args.log, args.ci, args.method, len(xs), FIT_METHODS
    )  # sma/ma, lts with several predictors: exit 2
    off = [
        flag
        for flag, name, default in _LINE_ONLY
        if getattr(args, name, default) not in (default, None)
    ]
    if off:
        raise UsageError(
            f"{', '.join(off)} {'is' if len(off) == 1 else 'are'} not available with several "
            "predictors or --factor yet"
        )
    if args.method != "pgls" and (args.tree is not None or args.lambda_ is not None):
        raise UsageError("--tree and --lambda apply only to --method pgls")
    against = _against(args.against)
    needed = [args.y, *xs] + ([args.factor] if args.factor else [])
    table = _table(args, needed)
    opts = _tree_options(args) if args.method == "pgls" else {}
    result = multiple_fit(
        table,
        args.y,
        xs,
        factor=args.factor,
        method=args.method,
        log=args.log,
        ci=args.ci,
        taxon_col=args.taxon_col,
        against=against,
        **opts,
    )
    sens = _sensitivity(args, xs, against, opts) if args.sensitivity else None
    if sens is not None:
        import dataclasses

        result = dataclasses.replace(result, sensitivity=sens.to_dict())
    if args.format == "json":
        emit(dumps(result.to_dict()))
    elif args.format == "csv":
        import pandas as pd

        from comparo.base.csvsafe import to_csv

        rows = [
            {
                "term": t["term"],
                "estimate": t["estimate"],
                "se": t["se"],
                "ci_low": t["ci"][0],
                "ci_high": t["ci"][1],
                "t": t["t"],
                "p": t["p"],
            }
            for t in result.terms
        ]
        sys.stdout.write(to_csv(pd.DataFrame(rows)))
    else:
        emit(result.summary() + ("" if sens is None else "\n" + sens.summary()))
    return 0


def _sensitivity(args, xs: list[str], against, opts: dict):
    """Leave one source out of the multiple regression (a dataset folder; a plain table says
    it records no sources). --mc does not apply: no Monte Carlo with several predictors."""
    from comparo.cli.commands.fit import is_dataset, read_table
    from comparo.fitting.multiple_sensitivity import multiple_sensitivity

    if is_dataset(args.data):
        from comparo.validation.dataset import load

        data = load(args.data)
    else:
        data = read_table(args.data, args.taxon_col, say=False)
    return multiple_sensitivity(
        data,
        args.y,
        xs,
        args.method,
        factor=args.factor,
        against=against,
        ci=args.ci,
        log=args.log,
        temperature=not args.no_temperature,
        taxon_col=args.taxon_col,
        progress=sys.stderr.isatty(),
        **opts,
    )
