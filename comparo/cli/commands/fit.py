"""``comparo fit DATA --x Q --y Q``: scaling fit with CIs, tests and flags."""

from __future__ import annotations

import sys
from pathlib import Path

from comparo.base.errors import UsageError
from comparo.base.outputs import dumps, emit
from comparo.cli.inputs import checked_tree, is_dataset, pgls_options, read_table

__all__ = ["checked_tree", "is_dataset", "pgls_options", "read_table", "run", "run_sensitivity"]


def _phylo_only_options(args) -> None:
    """--lambda, --reml, --tip-se and --tree mean something only for pgls: refuse them otherwise."""
    given = [
        flag
        for flag, on in (
            ("--lambda", args.lambda_ is not None),
            ("--reml", args.reml),
            ("--tip-se", getattr(args, "tip_se", False)),
            ("--tree", args.tree is not None),
        )
        if on
    ]
    if given and args.method != "pgls":
        raise UsageError(
            f"{', '.join(given)} {'applies' if len(given) == 1 else 'apply'} only to --method pgls "
            f"(the method here is {args.method})"
        )


def _fit(args, table, pgls: dict, progress: bool):
    from comparo.fitting import fit

    return fit(
        table,
        args.x,
        args.y,
        args.method,
        by=args.by,
        against=args.against,
        ci=args.ci,
        log=args.log,
        bootstrap=args.bootstrap,
        seed=args.seed,
        taxon_col=args.taxon_col,
        breakpoint=args.breakpoint,
        progress=progress,
        drop_flagged=getattr(args, "drop_flagged", None),
        **pgls,
    )


def _renamed_options(args) -> None:
    """``--test-slope`` is the old name of ``--against``: a note on standard error, then the
    value is used."""
    old = getattr(args, "test_slope_renamed", None)
    if old is None:
        return
    print(
        "comparo: note: --test-slope is renamed --against and will be removed; "
        'the JSON key is now "against"',
        file=sys.stderr,
    )
    if args.against is None:
        args.against = old


def run(args) -> int:
    from comparo.cli.commands.fit_multiple import one_x, run_multiple

    if not one_x(args):  # several --x, or --factor: the multiple regression
        return run_multiple(args)
    _renamed_options(args)
    _phylo_only_options(args)
    if args.sensitivity:
        return run_sensitivity(args)
    if _wants_imputation(args):
        return run_imputed(args)
    table = read_table(args.data, args.taxon_col, temperature=not args.no_temperature)
    pgls = pgls_options(args) if args.method == "pgls" else {}
    result = _fit(args, table, pgls, sys.stderr.isatty())
    if args.format == "json":
        emit(dumps(result.to_dict()))
    elif args.format == "csv":
        from comparo.base.csvsafe import to_csv

        sys.stdout.write(to_csv(result.to_frame()))
    else:
        emit(result.summary())
    return 0


def run_sensitivity(args) -> int:
    """``comparo fit ... --sensitivity``: the fit with its ``sensitivity`` field filled.

    Text output is the fit's summary followed by the sensitivity summary, JSON
    the fit object with ``"sensitivity"`` filled, CSV the table of
    :meth:`comparo.fitting.source_sensitivity.SensitivityResult.to_frame`. With ``--by`` the
    sensitivity of the pooled fit is followed by that of each group (JSON:
    ``"sensitivity"`` also holds ``"by_group"``; CSV: a ``group`` column; see
    docs/sensitivity.md).
    """
    from comparo.base.arguments import check_draws
    from comparo.fitting.source_sensitivity import (
        sensitivity,
        sensitivity_by_group,
        with_sensitivity,
    )

    pgls = pgls_options(args) if args.method == "pgls" else {}
    if is_dataset(args.data):
        from comparo.validation.dataset import load

        data = load(args.data)
    else:
        data = read_table(args.data, args.taxon_col)
    obs = getattr(data, "observations", data)
    n_taxa = obs[args.taxon_col].nunique() if args.taxon_col in obs else len(obs)
    check_draws(args.mc, int(n_taxa), args.method, "--mc")
    progress = sys.stderr.isatty()
    opts = dict(
        against=args.against,
        ci=args.ci,
        log=args.log,
        mc=args.mc,
        seed=args.seed,
        progress=progress,
        temperature=not args.no_temperature,
        taxon_col=args.taxon_col,
        **pgls,
    )
    sens = sensitivity(data, args.x, args.y, args.method, **opts)
    groups = (
        sensitivity_by_group(data, args.x, args.y, args.method, by=args.by, **opts)
        if args.by
        else None
    )
    table = read_table(args.data, args.taxon_col, temperature=not args.no_temperature, say=False)
    result = with_sensitivity(_fit(args, table, pgls, progress), sens, by_group=groups)
    if args.format == "json":
        emit(dumps(result.to_dict()))
    elif args.format == "csv":
        import pandas as pd

        from comparo.base.csvsafe import to_csv

        frame = sens.to_frame()
        if (
            groups is not None
        ):  # a group column, blank for the pooled fit; groups not computed are not rows
            frames = [frame.assign(group=None)] + [
                s.to_frame().assign(group=g) for g, s in groups.items() if not isinstance(s, str)
            ]
            frame = pd.concat([f for f in frames if len(f)] or frames[:1], ignore_index=True)
        sys.stdout.write(to_csv(frame))
    else:
        text = [result.summary(), sens.summary()]
        for g, s in (groups or {}).items():
            text.append(f"group {args.by} = {g}:\n" + s.summary())
        emit("\n".join(text))
    return 0


def _impute_table(args) -> dict | None:
    """The checked ``[impute]`` of the dataset's comparo.toml (None: absent or not a dataset
    folder). The dataset is loaded only when the file has an ``[impute]`` table."""
    import tomllib

    toml = Path(args.data) / "comparo.toml"
    if not toml.is_file():
        return None
    try:
        if "impute" not in tomllib.loads(toml.read_text(encoding="utf-8-sig")):
            return None
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return None  # refused with its message when the dataset is loaded
    from comparo.phylo.completion import impute_settings
    from comparo.validation.dataset import load

    ds = load(args.data)
    return impute_settings(ds.settings, ds.catalog)


def _wants_imputation(args) -> bool:
    """``--impute`` given, or ``[impute]`` in comparo.toml naming x or y."""
    if getattr(args, "impute", None) is not None:
        return True
    settings = _impute_table(args)
    return bool(settings) and bool({args.x, args.y} & set(settings["quantities"]))


def run_imputed(args) -> int:
    """``comparo fit ... --impute``: the fit on observed taxa and the same fit with imputed
    taxa by multiple imputation (docs/methods/imputation.md); JSON adds ``"imputation"``."""
    from comparo.fitting.imputed import fit_with_imputation
    from comparo.phylo.completion import DEFAULT_M
    from comparo.validation.dataset import load

    if not is_dataset(args.data):
        raise UsageError("--impute needs a dataset folder with a tree (not a plain CSV)")
    settings = _impute_table(args) or {}
    asked = [q.strip() for q in (args.impute or "").split(",") if q.strip()]
    quantities = asked or settings.get("quantities") or None
    m = (
        args.impute_m
        if getattr(args, "impute_m", None) is not None
        else settings.get("m", DEFAULT_M)
    )
    table = read_table(args.data, args.taxon_col, temperature=not args.no_temperature)
    pgls = pgls_options(args) if args.method == "pgls" else {}
    result = fit_with_imputation(
        load(args.data),
        table,
        args.x,
        args.y,
        args.method,
        quantities=quantities,
        with_=settings.get("with", []),
        lambda_=settings.get("lambda", "ml"),
        m=int(m),
        seed=args.seed,
        taxon_col=args.taxon_col,
        by=args.by,
        against=args.against,
        ci=args.ci,
        log=args.log,
        bootstrap=args.bootstrap,
        breakpoint=args.breakpoint,
        drop_flagged=getattr(args, "drop_flagged", None),
        **pgls,
    )
    if args.format == "json":
        emit(dumps(result.to_dict()))
    elif args.format == "csv":
        from comparo.base.csvsafe import to_csv

        sys.stdout.write(to_csv(result.to_frame()))
    else:
        emit(result.summary())
    return 0
