"""What several commands read from their DATA argument: a dataset folder or workbook, or a
plain CSV, as a per-taxon (or derived) table, and the tree options of a PGLS fit. Shared by
``fit``, ``compare`` and ``fit`` with several predictors, so none of those commands imports
another."""

from __future__ import annotations

import sys
from pathlib import Path
from types import SimpleNamespace

from comparo.base.errors import UsageError


def is_dataset(data: str) -> bool:
    """A dataset folder, or a dataset workbook (.xlsx with observations and sources sheets)."""
    path = Path(data)
    return path.is_dir() or (path.is_file() and path.suffix.lower() in (".xlsx", ".xlsm"))


def read_table(data: str, taxon_col: str = "taxon", temperature: bool = True, say: bool = True):
    """A per-taxon table from a dataset folder or workbook, or a plain CSV read as it is.

    A plain CSV without the label column names its points by its first column when
    that holds distinct text (copied as the label column), else by CSV line; a note
    on standard error says which (when *say*).
    """
    import pandas as pd

    path = Path(data)
    if is_dataset(data):
        from comparo.curation.aggregation import per_taxon
        from comparo.validation.dataset import load

        return per_taxon(load(path), temperature=temperature)
    if not path.is_file():
        raise UsageError(f"DATA {data!r} is neither a dataset folder nor a CSV file")
    try:
        frame = pd.read_csv(path)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise UsageError(f"cannot read {data!r} as CSV: {exc}") from None
    from comparo.base.csvsafe import restore_frame

    restore_frame(frame)  # the apostrophe before a formula-like text of a CSV comparo wrote
    if taxon_col in frame.columns or frame.empty:
        return frame
    first = frame.columns[0]
    text = frame[first]
    named = (
        not pd.api.types.is_numeric_dtype(text)
        and text.notna().all()
        and text.is_unique
        and pd.to_numeric(text, errors="coerce").isna().all()
    )
    if named:
        frame[taxon_col] = text.astype(str)
        note = f"points are named by its first column {first!r}"
    else:
        frame[taxon_col] = [f"row {i + 2}" for i in range(len(frame))]
        note = (
            "its first column is not a column of distinct names, so points are named by "
            "CSV line (row N)"
        )
    if say:
        sys.stderr.write(
            f"note: {path.name} has no {taxon_col!r} column: {note} (--taxon-col chooses the label "
            "column)\n"
        )
    return frame


def pgls_options(args) -> dict:
    """The options of a PGLS fit from the command line (--lambda, --reml, --tip-se, --tree or
    the dataset's own tree, and the taxa.csv tree labels)."""
    from comparo.reading.folder import TAXA_NAMES, TREE_NAMES, companion_file, is_workbook

    lam = "ml" if args.lambda_ is None else args.lambda_
    if lam != "ml":
        try:
            lam = float(lam)
        except ValueError:
            raise UsageError(
                f"--lambda must be 'ml' or a number in [0, 1] (got {args.lambda_!r})"
            ) from None
        if not 0 <= lam <= 1:
            raise UsageError(f"--lambda must lie in [0, 1] (got {lam})")
    opts = {"lambda_": lam, "reml": bool(args.reml)}
    if getattr(args, "tip_se", False):
        opts["tip_se"] = True
    tree = args.tree
    own_tree = companion_file(args.data, TREE_NAMES) if is_dataset(args.data) else None
    if tree is None and own_tree is not None:
        tree = str(own_tree)
    if tree is None:
        raise UsageError(
            "method pgls needs a tree: give --tree FILE or put tree.nwk in the dataset folder (or "
            "beside the dataset workbook)"
        )
    opts["tree"] = checked_tree(tree)
    taxa = companion_file(args.data, TAXA_NAMES) if Path(args.data).is_dir() else None
    if taxa is not None or is_workbook(args.data):
        from comparo.phylo import dataset_tree_labels, read_tree, tip_labels
        from comparo.validation.dataset import load

        ds = load(args.data)
        if (
            ds.taxa is not None
        ):  # the per-taxon table holds accepted names; one taxon on two tips is an error
            own = (
                ds.tree is not None
                and own_tree is not None
                and Path(tree).resolve() == own_tree.resolve()
            )
            given = opts["tree"] if not isinstance(opts["tree"], str) else read_tree(tree)
            labels = dataset_tree_labels(ds.taxa, tip_labels(ds.tree if own else given))
            if labels:
                opts["tree_labels"] = labels
    return opts


def checked_tree(path: str):
    """The tree file as :func:`comparo.phylo.trees.checked_topology` reads and checks it:
    the topology of plain Newick (fast), else the dendropy tree."""
    from comparo.phylo.trees import checked_topology

    return checked_topology(path)


def derived_table(args, needed: list[str]):
    """The per-taxon table; for a dataset with a needed column not in it, the derived table
    (per-taxon columns plus the derived time scales, bounds and ratios of ``comparo derive``)."""
    table = read_table(args.data, args.taxon_col, temperature=not args.no_temperature)
    if not is_dataset(args.data) or all(c in table.columns for c in needed):
        return table
    from comparo.derivation import derive
    from comparo.validation.dataset import load
    from comparo.validation.settings import derive_settings

    settings = derive_settings(load(args.data).settings)
    return derive(table, settings, progress=sys.stderr.isatty())


def tree_options(args) -> dict:
    """The tree options of ``compare`` and ``fit`` with several predictors (no --reml)."""
    shim = SimpleNamespace(data=args.data, lambda_=args.lambda_, reml=False, tree=args.tree)
    opts = pgls_options(shim)
    opts.pop("reml", None)
    return opts
