"""``comparo fit`` with several ``--x`` (or ``--factor``): the multiple regression of
:func:`comparo.fitting.multiple_fit`. With one ``--x`` the options keep their one-line meaning."""

from __future__ import annotations

import sys

from comparo.base.errors import UsageError
from comparo.base.outputs import dumps, emit

# options of the one-predictor fit that the multiple regression does not offer, and why
_LINE_ONLY = (
    (
        "--breakpoint",
        "breakpoint",
        False,
        "a broken line bends along one x; fit one predictor at a time with --breakpoint",
    ),
    (
        "--drop-flagged",
        "drop_flagged",
        None,
        "the multiple fit lists its flags (JSON 'outliers') without refitting; if a flagged "
        "taxon is an error, correct the data, or compare the fit with --sensitivity",
    ),
    (
        "--reml",
        "reml",
        False,
        "the multiple fit reports the maximum likelihood, which AICc and model comparison "
        "need (REML likelihoods of models with different predictors are not comparable)",
    ),
    (
        "--tip-se",
        "tip_se",
        False,
        "measurement-error variance in the PGLS likelihood is offered for one predictor; with "
        "several, --sensitivity propagates the uncertainties of y and every predictor by draws",
    ),
)


def one_x(args) -> bool:
    """True for a one-line fit (one --x, no --factor): ``args.x`` becomes that name and
    ``args.against`` one number (or None). False for the multiple regression."""
    xs = args.x if isinstance(args.x, list) else [args.x]
    if len(xs) > 1 or getattr(args, "factor", None) or getattr(args, "x_linear", None):
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
    from comparo.cli.inputs import derived_table, tree_options
    from comparo.fitting.multiple import FIT_METHODS, check_options
    from comparo.fitting.multiple_extras import multiple_fit

    xs = list(dict.fromkeys(args.x))
    if len(xs) < len(args.x):
        raise UsageError("an --x is given twice")
    check_options(
        args.log, args.ci, args.method, len(xs), FIT_METHODS
    )  # sma/ma, lts with several predictors: exit 2
    off = [
        f"{flag}: {why}"
        for flag, name, default, why in _LINE_ONLY
        if getattr(args, name, default) not in (default, None)
    ]
    if off:
        raise UsageError("not available with several predictors or --factor: " + "; ".join(off))
    if args.by and args.factor:
        raise UsageError(
            f"--by {args.by} and --factor {args.factor}: give one. --factor fits one set of "
            "exponents with a separate elevation per level; --by fits the model in each group"
        )
    if args.bootstrap and args.method == "pgls":
        from comparo.fitting.multiple_resampling import PGLS_BOOTSTRAP

        raise UsageError(PGLS_BOOTSTRAP)
    if args.bootstrap < 0:
        raise UsageError(f"--bootstrap must be 0 or a positive number (got {args.bootstrap})")
    if args.method != "pgls" and (args.tree is not None or args.lambda_ is not None):
        raise UsageError("--tree and --lambda apply only to --method pgls")
    against = _against(args.against)
    needed = [args.y, *xs] + ([args.factor] if args.factor else [])
    table = derived_table(args, needed)
    opts = tree_options(args) if args.method == "pgls" else {}
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
        linear=args.x_linear,
        by=args.by,
        bootstrap=args.bootstrap,
        seed=args.seed,
        **opts,
    )
    extra, text = _extras(args, table, xs, result, against, opts)
    if extra:
        import dataclasses

        result = dataclasses.replace(result, **extra)
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
        emit("\n".join([result.summary(), *text]))
    return 0


def _extras(args, table, xs: list[str], result, against, opts: dict) -> tuple[dict, list[str]]:
    """The parts asked beside the fit, as fields of the result and lines of text: leave one
    source out with the taxon jackknife and the measurement-error draws (key
    ``sensitivity``); the text of the group-wise fits and the bootstrap, which the fit itself
    made (:func:`comparo.fitting.multiple_extras.multiple_fit`, keys ``by``, ``resampling``)."""
    from comparo.fitting import multiple_resampling as mr
    from comparo.fitting.multiple import design, linear_predictors

    out: dict = {}
    text: list[str] = []
    d = None
    if args.sensitivity and args.mc:
        d = design(
            table, args.y, xs, factor=args.factor, log=result.log, taxon_col=args.taxon_col,
            tree=opts.get("tree"), tree_labels=opts.get("tree_labels"),
            linear=linear_predictors(xs, args.x_linear, args.y),
        )  # fmt: skip
    if result.by is not None:  # the fits within each group, made by the fit itself
        from comparo.fitting.multiple_groups import by_lines

        text += by_lines(result.by)
    if result.resampling is not None:  # the bootstrap, likewise
        text += mr.resampling_lines(result.resampling)
    if args.sensitivity:
        sens = _sensitivity(args, xs, against, {**opts, "linear": args.x_linear})
        kw = {k: v for k, v in opts.items() if k != "lambda_"}
        part = sens.to_dict()
        part["jackknife"] = mr.jackknife_terms(
            table, result, taxon_col=args.taxon_col, fit_options=kw
        )
        if args.mc:
            part["measurement_error"] = mr.measurement_error_terms(
                table, d, result, args.mc, args.seed, taxon_col=args.taxon_col
            )
        out["sensitivity"] = part
        text += [sens.summary(), *mr.resampling_lines(part)]
    return out, text


def _sensitivity(args, xs: list[str], against, opts: dict):
    """Leave one source out of the multiple regression (a dataset folder; a plain table says
    it records no sources). --mc does not apply: no Monte Carlo with several predictors."""
    from comparo.cli.inputs import is_dataset, read_table
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
