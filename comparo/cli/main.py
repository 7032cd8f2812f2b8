"""The ``comparo`` command line: a thin shell over the Python API.

Only argparse is imported at start-up; each command's module (and pandas,
pint, statsmodels...) is imported when that command runs, so ``comparo
--help`` is instant.

Exit codes: 0 success; 1 the analysis ran but found problems under
``--strict``; 2 bad input or usage (a clear message, never a traceback).
"""

from __future__ import annotations

import argparse
import os
import sys
from importlib import import_module

EXIT_OK, EXIT_STRICT, EXIT_INPUT = 0, 1, 2
EXIT_INTERNAL = 3


class _Parser(argparse.ArgumentParser):
    """argparse with usage errors on exit code 2 and one clear line (argparse's default)."""


class _DefaultsFormatter(argparse.HelpFormatter):
    """Help that shows each option's default, unless its text already states it."""

    def _get_help_string(self, action: argparse.Action) -> str:
        text = action.help or ""
        default = action.default
        if (
            "default" in text
            or default is None
            or default is False
            or default == argparse.SUPPRESS
            or not action.option_strings
            or isinstance(action, argparse._HelpAction | argparse._VersionAction)
        ):
            return text
        return f"{text} (default: %(default)s)" if text else "default: %(default)s"


def _dataset_arg(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "dataset",
        metavar="DATASET",
        help="dataset folder (observations + sources, optional taxa, tree, comparo.toml)",
    )


def _output_arg(
    p: argparse.ArgumentParser,
    what: str = "output file (default: standard output; '-' also means it)",
) -> None:
    p.add_argument("-o", "--output", metavar="FILE", default=None, help=what)
    p.set_defaults(output_kind="file")


def _output_dir_arg(
    p: argparse.ArgumentParser, what: str = "output folder", required: bool = True
) -> None:
    p.add_argument("-o", "--output", metavar="DIR", required=required, default=None, help=what)
    p.set_defaults(output_kind="dir")


def _temperature_arg(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--no-temperature",
        action="store_true",
        help="do not normalise rates and frequencies to the reference temperature",
    )


def build_parser() -> argparse.ArgumentParser:
    from comparo.base.version import __version__

    parser = _Parser(
        prog="comparo",
        description="Cross-taxa compilations of muscle mechanics: check, harmonise, derive, fit, report.",
        epilog="Run 'comparo COMMAND --help' for the options of one command.",
    )
    parser.add_argument("--version", action="version", version=f"comparo {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("check", help="validate a dataset; list every problem (exit 2 on errors)")
    _dataset_arg(p)
    p.add_argument(
        "--format",
        choices=["text", "csv", "json"],
        default="text",
        help="output format (default text)",
    )
    p.add_argument("--strict", action="store_true", help="exit 1 when there are warnings")
    p.add_argument(
        "--all",
        action="store_true",
        help="text output: list every problem row (default: the first 25 per rule, then a count)",
    )

    p = sub.add_parser(
        "audit", help="provenance audit: coverage, basis mix, conflicts, row accounting"
    )
    _dataset_arg(p)
    p.add_argument(
        "--format", choices=["text", "json", "csv"], default="text", help="output format"
    )
    _temperature_arg(p)
    p.add_argument(
        "--strict", action="store_true", help="exit 1 when conflicts or unit slips are found"
    )
    _output_dir_arg(
        p,
        "also write audit.json, coverage.csv, sources.csv, excluded.csv and lineage.csv to DIR",
        required=False,
    )

    p = sub.add_parser("table", help="per-taxon harmonised table (CSV)")
    _dataset_arg(p)
    _output_arg(
        p,
        "output file (default: standard output): a CSV gets its units in NAME.units.csv beside it; "
        "a name ending in .xlsx writes a workbook with the units in the headers",
    )
    _temperature_arg(p)
    p.add_argument(
        "--aggregate",
        choices=["mean", "median"],
        default=None,
        help="how repeated values combine (default: settings, else weighted mean)",
    )
    p.add_argument(
        "--impute",
        nargs="?",
        const="",
        default=None,
        metavar="Q1,Q2",
        help="add phylogenetically imputed values (basis 'imputed', lineage, prediction SE as "
        "uncertainty) of Q1,Q2 (default: [impute] of comparo.toml)",
    )

    p = sub.add_parser("derive", help="per-taxon table plus derived time scales and ratios (CSV)")
    _dataset_arg(p)
    _output_arg(p)
    _temperature_arg(p)
    p.add_argument(
        "--mc",
        type=int,
        default=0,
        metavar="N",
        help="Monte Carlo draws for uncertainty (0: first-order only)",
    )
    p.add_argument("--seed", type=int, default=20240601, help="random seed for Monte Carlo")
    p.add_argument(
        "--impute",
        nargs="?",
        const="",
        default=None,
        metavar="Q1,Q2",
        help="add phylogenetically imputed values (basis 'imputed', lineage, prediction SE as "
        "uncertainty) of Q1,Q2 (default: [impute] of comparo.toml)",
    )

    p = sub.add_parser("fit", help="scaling fit of y on x with confidence intervals and tests")
    p.add_argument(
        "data",
        metavar="DATA",
        help="dataset folder (quantities by key) or a plain CSV (columns by name)",
    )
    p.add_argument(
        "--x",
        required=True,
        action="append",
        help="x quantity key or column; repeat for several predictors (multiple regression: ols or pgls)",
    )
    p.add_argument("--y", required=True, help="y quantity key or column")
    p.add_argument(
        "--factor",
        metavar="COLUMN",
        default=None,
        help="add a categorical predictor (treatment coding, first level in sorted order the reference)",
    )
    p.add_argument(
        "--method",
        choices=["ols", "sma", "ma", "robust", "lts", "pgls"],
        default="sma",
        help="line: ols, sma or ma (model II), robust (Huber), lts, pgls (phylogenetic)",
    )
    p.add_argument(
        "--tree",
        metavar="FILE",
        default=None,
        help="Newick tree for pgls (default: the dataset's tree.nwk)",
    )
    p.add_argument(
        "--lambda",
        dest="lambda_",
        default=None,
        metavar="ml|VALUE",
        help="Pagel's lambda for pgls: 'ml' (default) or a value in [0, 1]",
    )
    p.add_argument(
        "--reml",
        action="store_true",
        help="pgls: REML for the lambda search and the reported likelihood",
    )
    p.add_argument(
        "--tip-se",
        action="store_true",
        help="pgls: add the per-taxon standard uncertainties of y (column Y_u) as measurement-error variance",
    )
    p.add_argument(
        "--by", metavar="COLUMN", default=None, help="fit per group and test for a common slope"
    )
    p.add_argument(
        "--against",
        action="append",
        default=None,
        metavar="VALUE|TERM=VALUE",
        help="test the slope against this exponent (e.g. 1 for isometry); with several --x, "
        "TERM=VALUE, repeated, for a joint Wald F test",
    )
    # the old name of --against, kept one release; hidden from --help, warns on use
    p.add_argument(
        "--test-slope", dest="test_slope_renamed", type=float, default=None, help=argparse.SUPPRESS
    )
    p.add_argument(
        "--ci", type=float, default=0.95, metavar="LEVEL", help="confidence level (default 0.95)"
    )
    p.add_argument(
        "--bootstrap",
        type=int,
        default=0,
        metavar="N",
        help="add percentile and BCa bootstrap CIs from N resamples",
    )
    p.add_argument("--seed", type=int, default=20240601, help="random seed for resampling")
    p.add_argument(
        "--log",
        choices=["10", "e", "none"],
        default="10",
        help="log transform of both axes (default 10)",
    )
    p.add_argument(
        "--taxon-col", default="taxon", help="label column of a plain CSV (default taxon)"
    )
    p.add_argument(
        "--breakpoint", action="store_true", help="also fit a broken-line (segmented) model"
    )
    p.add_argument(
        "--drop-flagged",
        nargs="?",
        const="default",
        default=None,
        metavar="RULES",
        help="also refit without flagged points and report it beside the original; RULES: comma list of "
        "bonferroni, leverage, cooks_d, robust_weight, lts_residual, or outlier (default), cook, all",
    )
    p.add_argument("--sensitivity", action="store_true", help="source-level sensitivity of the fit")
    p.add_argument(
        "--impute",
        nargs="?",
        const="",
        default=None,
        metavar="Q1,Q2",
        help="also fit with phylogenetically imputed taxa by multiple imputation (Rubin's rules); "
        "Q1,Q2: quantities to impute (default: [impute] of comparo.toml, else x and y)",
    )
    p.add_argument(
        "--impute-m",
        type=int,
        default=None,
        metavar="M",
        help="--impute: completed tables drawn (default: [impute] m, else 20)",
    )
    p.add_argument(
        "--mc",
        type=int,
        default=1000,
        metavar="N",
        help="--sensitivity: Monte Carlo draws for measurement error (default 1000; 0: skip)",
    )
    p.add_argument(
        "--format", choices=["text", "json", "csv"], default="text", help="output format"
    )
    _temperature_arg(p)

    p = sub.add_parser(
        "impute",
        help="predict a quantity for the tips of the tree without it, "
        "from relatives (BM, Pagel's lambda), leave-one-out checked",
    )
    _dataset_arg(p)
    p.add_argument(
        "--y",
        required=True,
        metavar="QUANTITY",
        help="catalogue key of a positive quantity (imputed on log10)",
    )
    p.add_argument(
        "--with",
        dest="with_",
        default=None,
        metavar="Q1,Q2",
        help="correlated positive quantities: predict under multivariate Brownian motion "
        "(trait covariance by REML, missing values integrated out)",
    )
    p.add_argument(
        "--lambda",
        dest="lambda_",
        default="ml",
        metavar="ml|VALUE",
        help="Pagel's lambda: 'ml' (default) or a value in [0, 1]",
    )
    p.add_argument(
        "--format",
        choices=["text", "csv", "json"],
        default="text",
        help="output format (default text)",
    )
    _output_arg(p)

    p = sub.add_parser(
        "compare",
        help="compare candidate models of y (sets of predictors) by AICc and Akaike weights",
    )
    p.add_argument(
        "data",
        metavar="DATA",
        help="dataset folder (quantities and derived quantities by key) or a plain CSV",
    )
    p.add_argument("--y", required=True, help="y quantity key or column")
    p.add_argument(
        "--model",
        action="append",
        required=True,
        metavar="X1[,X2...]",
        help="one candidate model: comma-separated predictors ('1': intercept only); repeat for each model",
    )
    p.add_argument(
        "--factor",
        metavar="COLUMN",
        default=None,
        help="categorical column in every model (treatment coding, first level in sorted order the reference)",
    )
    p.add_argument(
        "--method",
        choices=["ols", "pgls"],
        default="ols",
        help="ols (default) or pgls (phylogenetic)",
    )
    p.add_argument(
        "--tree",
        metavar="FILE",
        default=None,
        help="Newick tree for pgls (default: the dataset's tree.nwk)",
    )
    p.add_argument(
        "--lambda",
        dest="lambda_",
        default=None,
        metavar="ml|VALUE",
        help="Pagel's lambda for pgls: 'ml' (default, estimated in each model) or a value in [0, 1]",
    )
    p.add_argument(
        "--ci",
        type=float,
        default=0.95,
        metavar="LEVEL",
        help="confidence level of the coefficients (default 0.95)",
    )
    p.add_argument(
        "--log",
        choices=["10", "e", "none"],
        default="10",
        help="log transform of y and every predictor (default 10)",
    )
    p.add_argument(
        "--taxon-col", default="taxon", help="label column of a plain CSV (default taxon)"
    )
    p.add_argument("--format", choices=["text", "json"], default="text", help="output format")
    _temperature_arg(p)

    p = sub.add_parser(
        "cycles",
        help="strain cycles and work loops reduced from the traces of a dataset (traces.csv)",
    )
    _dataset_arg(p)
    p.add_argument(
        "--format",
        choices=["text", "json", "csv"],
        default="text",
        help="output format (default text)",
    )
    p.add_argument(
        "--no-drift-removal",
        action="store_true",
        help="reduce the signals as recorded (no linear or quadratic drift subtracted)",
    )
    _output_arg(p)
    _temperature_arg(p)

    p = sub.add_parser(
        "diff", help="what changed between two versions of a dataset (exit 1 if any)"
    )
    p.add_argument("old", metavar="OLD", help="the earlier version: dataset folder or workbook")
    p.add_argument("new", metavar="NEW", help="the later version: dataset folder or workbook")
    p.add_argument(
        "--format", choices=["text", "json", "html"], default="text", help="output format"
    )
    _output_arg(p)
    _temperature_arg(p)
    p.add_argument(
        "--seed",
        type=int,
        default=20240601,
        help="random seed of the fits (the same for both versions)",
    )

    p = sub.add_parser(
        "merge", help="three-way merge of two copies of a dataset (exit 2 on conflicts)"
    )
    p.add_argument("a", metavar="A", help="one curator's copy: dataset folder or workbook")
    p.add_argument("b", metavar="B", help="the other curator's copy")
    p.add_argument("--base", metavar="BASE", help="the version both copies started from")
    p.add_argument(
        "-o", "--output", required=True, metavar="OUT", help="new folder for the merged dataset"
    )
    p.add_argument(
        "--resolve", metavar="FILE", help="a conflicts file with its 'take' column filled"
    )
    p.set_defaults(output_kind="dir")

    p = sub.add_parser("report", help="full analysis: HTML report, figures and tables")
    _dataset_arg(p)
    _output_dir_arg(p)
    p.add_argument("--seed", type=int, default=20240601)
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument(
        "--since",
        metavar="OLD",
        default=None,
        help="an older version (folder or workbook): add a 'What changed' section",
    )
    _temperature_arg(p)

    p = sub.add_parser("export", help="export to open data standards")
    _dataset_arg(p)
    p.add_argument(
        "--to",
        choices=["datapackage", "dwc"],
        required=True,
        help="Frictionless Data Package or Darwin Core MeasurementOrFact",
    )
    _output_dir_arg(p)

    p = sub.add_parser("demo", help="write the synthetic demo compilation and run the report on it")
    _output_dir_arg(p)
    p.add_argument("--seed", type=int, default=20240601, help="random seed for resampling")
    p.add_argument("--quiet", action="store_true", help="no progress bar")

    p = sub.add_parser(
        "import",
        help="a wide table (one column per trait, units in the headers) to a new dataset folder",
    )
    p.add_argument(
        "wide", metavar="WIDE", help="wide table: .csv, .tsv or .xlsx (first sheet unless --sheet)"
    )
    p.add_argument(
        "-o",
        "--output",
        metavar="FOLDER",
        required=True,
        help="dataset folder to write (new, or empty)",
    )
    p.set_defaults(output_kind="dataset")
    p.add_argument(
        "--sources",
        metavar="FILE",
        default=None,
        help="sources table to copy in (.csv, .tsv, .bib, .xlsx); default: stub rows needing a citation",
    )
    p.add_argument(
        "--map",
        metavar="FILE",
        default=None,
        help="header decisions: a map CSV (header,role,key,unit,basis) or an earlier import.toml",
    )
    p.add_argument(
        "--sheet",
        metavar="NAME",
        default=None,
        help="sheet of an .xlsx workbook (default: the first)",
    )
    p.add_argument(
        "--decimal-comma",
        action="store_true",
        help="read ',' as the decimal mark (semicolon-delimited spreadsheet exports)",
    )
    p.add_argument(
        "--header-row",
        metavar="N",
        type=int,
        default=None,
        help="the column headers are on row N, as the spreadsheet numbers it (title rows above are ignored); default: the first non-blank row",
    )
    p.add_argument(
        "--plus-minus",
        metavar="KIND",
        choices=["sd", "se", "ci95", "range_half"],
        default=None,
        help="split cells such as '12.5 ± 0.3' (also +/-, +-) into value and uncertainty of this kind: sd, se, ci95 or range_half",
    )
    p.add_argument(
        "--overwrite",
        action="store_true",
        help="write into an existing non-empty folder, replacing the tables an import writes",
    )
    p.add_argument("--format", choices=["text", "json"], default="text")

    p = sub.add_parser(
        "template", help="an entry workbook (.xlsx) with drop-down lists from the catalogue"
    )
    _output_arg(p, "workbook to write (.xlsx)")
    p.add_argument(
        "--dataset",
        metavar="DS",
        default=None,
        help="also offer this dataset's own comparo.toml quantities",
    )

    p = sub.add_parser("units", help="list the quantity catalogue with canonical units")
    p.add_argument(
        "dataset",
        metavar="DATASET",
        nargs="?",
        default=None,
        help="include a dataset's own quantities",
    )
    p.add_argument(
        "--format", choices=["text", "csv", "json"], default="text", help="output format"
    )

    for command in sub.choices.values():
        command.formatter_class = _DefaultsFormatter
    return parser


def _guard_output(args: argparse.Namespace) -> None:
    """Refuse a bad seed, an output inside an input and wrong kinds of output path before any work."""
    if getattr(args, "seed", None) is not None:
        from comparo.base.arguments import check_seed

        check_seed(args.seed)
    output = getattr(args, "output", None)
    if output is None:
        return
    from comparo.base.outputs import guard_output

    guard_output(output, kind=getattr(args, "output_kind", "file"), inputs=_inputs(args))


def _inputs(args: argparse.Namespace) -> list:
    """The command's input paths: every write of the command is refused on or inside them."""
    names = ("dataset", "data", "tree", "wide", "sources", "map", "old", "new", "since")
    return [getattr(args, name, None) for name in names]


_MODULES = {"import": "import_sheet"}


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``comparo`` console script; returns the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not args.command:
        parser.print_help()
        return EXIT_OK
    # one module per command; `import` is a Python keyword, so its module is import_sheet
    module = import_module(f"comparo.cli.commands.{_MODULES.get(args.command, args.command)}")
    from comparo.base.errors import ComparoError, InputError, UsageError

    try:
        _guard_output(args)
        from comparo.base.outputs import protecting

        with protecting(_inputs(args)):
            return int(module.run(args) or 0)
    except InputError as exc:
        from comparo.base.outputs import print_problems

        print_problems(exc.problems, stream=sys.stderr)
        return EXIT_INPUT
    except UsageError as exc:
        print(f"comparo {args.command}: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except ComparoError as exc:
        print(f"comparo {args.command}: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return EXIT_OK
    except MemoryError:
        print(
            f"comparo {args.command}: not enough memory for this run (the process could not allocate "
            "what it needs; see docs/cli.md, 'Limits'): use fewer draws or resamples, or a smaller input",
            file=sys.stderr,
        )
        return EXIT_INPUT
    except Exception as exc:  # a bug in comparo, not the user's fault
        if os.environ.get("COMPARO_DEBUG"):
            raise
        print(
            f"comparo {args.command}: internal error ({type(exc).__name__}: {exc}). "
            "This is a bug in comparo; rerun with COMPARO_DEBUG=1 for the traceback and report it.",
            file=sys.stderr,
        )
        return EXIT_INTERNAL


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
