"""``comparo fit DATA --x Q --y Q``: scaling fit with CIs, tests and flags."""

from __future__ import annotations

import sys
from pathlib import Path

from comparo.commands._common import dumps, emit
from comparo.errors import UsageError


def read_table(data: str, taxon_col: str = "taxon", temperature: bool = True):
    """A per-taxon table from a dataset folder, or a plain CSV read as it is."""
    import pandas as pd

    path = Path(data)
    if path.is_dir():
        from comparo.curate import per_taxon
        from comparo.io import load

        return per_taxon(load(path), temperature=temperature)
    if not path.is_file():
        raise UsageError(f"DATA {data!r} is neither a dataset folder nor a CSV file")
    try:
        return pd.read_csv(path)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise UsageError(f"cannot read {data!r} as CSV: {exc}") from None


def _pgls_options(args) -> dict:
    lam = args.lambda_
    if lam != "ml":
        try:
            lam = float(lam)
        except ValueError:
            raise UsageError(f"--lambda must be 'ml' or a number in [0, 1] (got {args.lambda_!r})") from None
        if not 0 <= lam <= 1:
            raise UsageError(f"--lambda must lie in [0, 1] (got {lam})")
    opts = {"lambda_": lam, "reml": bool(args.reml)}
    if getattr(args, "tip_se", False):
        opts["tip_se"] = True
    tree = args.tree
    if tree is None and Path(args.data).is_dir() and (Path(args.data) / "tree.nwk").is_file():
        tree = str(Path(args.data) / "tree.nwk")
    if tree is None:
        raise UsageError("method pgls needs a tree: give --tree FILE or put tree.nwk in the dataset folder")
    opts["tree"] = tree
    taxa = Path(args.data) / "taxa.csv" if Path(args.data).is_dir() else None
    if taxa is not None and taxa.is_file():
        from comparo.io import load

        ds = load(args.data)
        if ds.taxa is not None and "tree_label" in ds.taxa:
            t = ds.taxa  # the per-taxon table holds accepted names
            acc = [a or n for n, a in zip(t["taxon"], t.get("accepted_name", t["taxon"]), strict=True)]
            opts["tree_labels"] = {a: lab for a, lab in zip(acc, t["tree_label"], strict=True) if lab}
    return opts


def run(args) -> int:
    from comparo.fit import fit

    if args.sensitivity:
        from comparo.sensitivity import run_command

        return run_command(args)
    table = read_table(args.data, args.taxon_col, temperature=not args.no_temperature)
    pgls = _pgls_options(args) if args.method == "pgls" else {}
    result = fit(
        table, args.x, args.y, args.method, by=args.by, test_slope=args.test_slope, ci=args.ci, log=args.log,
        bootstrap=args.bootstrap, seed=args.seed, taxon_col=args.taxon_col, breakpoint=args.breakpoint,
        progress=sys.stderr.isatty(), **pgls,
    )
    if args.format == "json":
        emit(dumps(result.to_dict()))
    elif args.format == "csv":
        from comparo.csvsafe import to_csv

        sys.stdout.write(to_csv(result.to_frame()))
    else:
        emit(result.summary())
    return 0
