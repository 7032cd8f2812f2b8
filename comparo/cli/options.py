"""The options of every command: one small function per command registers its arguments.

Only argparse is imported here; :func:`comparo.cli.main.build_parser` calls each function of
:data:`COMMANDS` in order (the order of ``comparo --help``). The names, options and help texts
are a contract (docs/cli.md); tests/test_cli_help.py holds them word for word.
"""

from __future__ import annotations

import argparse
from collections.abc import Callable
from typing import Any

SEED = 20240601
"""The default random seed of every command that draws random numbers."""

Sub = Any
"""What ``ArgumentParser.add_subparsers`` returns (its class is private to argparse)."""


class DefaultsFormatter(argparse.HelpFormatter):
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


def _data_arg(p: argparse.ArgumentParser, what: str) -> None:
    p.add_argument("data", metavar="DATA", help=what)


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


def _x_linear_arg(p: argparse.ArgumentParser) -> None:
    """fit and compare: predictors entered untransformed."""
    p.add_argument(
        "--x-linear",
        action="append",
        default=None,
        metavar="NAME",
        help="enter this predictor untransformed (not logged); repeat for several. "
        "temperature_c (degrees C, an interval scale) always enters untransformed",
    )


def _impute_arg(p: argparse.ArgumentParser) -> None:
    """table and derive: imputed values added to the per-taxon table."""
    p.add_argument(
        "--impute",
        nargs="?",
        const="",
        default=None,
        metavar="Q1,Q2",
        help="add phylogenetically imputed values (basis 'imputed', lineage, prediction SE as "
        "uncertainty) of Q1,Q2 (default: [impute] of comparo.toml)",
    )


def _temperature_arg(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--no-temperature",
        action="store_true",
        help="do not normalise rates and frequencies to the reference temperature",
    )


def _format_arg(
    p: argparse.ArgumentParser, choices: list[str], what: str | None = "output format"
) -> None:
    p.add_argument("--format", choices=choices, default="text", help=what)


def _seed_arg(p: argparse.ArgumentParser, what: str | None = "random seed for resampling") -> None:
    p.add_argument("--seed", type=int, default=SEED, help=what)


def _lambda_arg(p: argparse.ArgumentParser, what: str, default: str | None = None) -> None:
    p.add_argument("--lambda", dest="lambda_", default=default, metavar="ml|VALUE", help=what)


def _tree_arg(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--tree",
        metavar="FILE",
        default=None,
        help="Newick tree for pgls (default: the dataset's tree.nwk)",
    )


def _log_arg(p: argparse.ArgumentParser, what: str) -> None:
    p.add_argument("--log", choices=["10", "e", "none"], default="10", help=what)


def _taxon_col_arg(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--taxon-col", default="taxon", help="label column of a plain CSV (default taxon)"
    )


def add_check(sub: Sub) -> None:
    p = sub.add_parser("check", help="validate a dataset; list every problem (exit 2 on errors)")
    _dataset_arg(p)
    _format_arg(p, ["text", "csv", "json"], "output format (default text)")
    p.add_argument("--strict", action="store_true", help="exit 1 when there are warnings")
    p.add_argument(
        "--all",
        action="store_true",
        help="text output: list every problem row (default: the first 25 per rule, then a count)",
    )


def add_audit(sub: Sub) -> None:
    p = sub.add_parser(
        "audit", help="provenance audit: coverage, basis mix, conflicts, row accounting"
    )
    _dataset_arg(p)
    _format_arg(p, ["text", "json", "csv"])
    _temperature_arg(p)
    p.add_argument(
        "--strict", action="store_true", help="exit 1 when conflicts or unit slips are found"
    )
    _output_dir_arg(
        p,
        "also write audit.json, coverage.csv, sources.csv, excluded.csv and lineage.csv to DIR",
        required=False,
    )


def add_table(sub: Sub) -> None:
    p = sub.add_parser("table", help="per-taxon harmonised table (CSV)")
    _dataset_arg(p)
    _output_arg(
        p,
        "output file (default: standard output): a CSV gets its units in NAME.units.csv beside "
        "it; a name ending in .xlsx writes a workbook with the units in the headers",
    )
    _temperature_arg(p)
    p.add_argument(
        "--aggregate",
        choices=["mean", "median"],
        default=None,
        help="how repeated values combine (default: settings, else weighted mean)",
    )
    _impute_arg(p)


def add_derive(sub: Sub) -> None:
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
    _seed_arg(p, "random seed for Monte Carlo")
    _impute_arg(p)


def _fit_model_args(p: argparse.ArgumentParser) -> None:
    """fit: what is fitted (data, x, y, factor, method, tree and its options)."""
    _data_arg(p, "dataset folder (quantities by key) or a plain CSV (columns by name)")
    p.add_argument(
        "--x",
        required=True,
        action="append",
        help="x quantity key or column; repeat for several predictors "
        "(multiple regression: ols or pgls)",
    )
    p.add_argument("--y", required=True, help="y quantity key or column")
    p.add_argument(
        "--factor",
        metavar="COLUMN",
        default=None,
        help="add a categorical predictor "
        "(treatment coding, first level in sorted order the reference)",
    )
    _x_linear_arg(p)
    p.add_argument(
        "--method",
        choices=["ols", "sma", "ma", "robust", "lts", "pgls"],
        default="sma",
        help="line: ols, sma or ma (model II), robust (Huber), lts, pgls (phylogenetic)",
    )
    _tree_arg(p)
    _lambda_arg(p, "Pagel's lambda for pgls: 'ml' (default) or a value in [0, 1]")
    p.add_argument(
        "--reml",
        action="store_true",
        help="pgls: REML for the lambda search and the reported likelihood",
    )
    p.add_argument(
        "--tip-se",
        action="store_true",
        help="pgls: add the per-taxon standard uncertainties of y (column Y_u) "
        "as measurement-error variance",
    )


def _fit_test_args(p: argparse.ArgumentParser) -> None:
    """fit: groups, tests, intervals and resampling."""
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
    _seed_arg(p)
    _log_arg(p, "log transform of both axes (default 10)")
    _taxon_col_arg(p)


def add_fit(sub: Sub) -> None:
    p = sub.add_parser("fit", help="scaling fit of y on x with confidence intervals and tests")
    _fit_model_args(p)
    _fit_test_args(p)
    p.add_argument(
        "--breakpoint", action="store_true", help="also fit a broken-line (segmented) model"
    )
    p.add_argument(
        "--drop-flagged",
        nargs="?",
        const="default",
        default=None,
        metavar="RULES",
        help="also refit without flagged points and report it beside the original; RULES: comma "
        "list of bonferroni, leverage, cooks_d, robust_weight, lts_residual, or outlier "
        "(default), cook, all",
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
    _format_arg(p, ["text", "json", "csv"])
    _temperature_arg(p)


def add_impute(sub: Sub) -> None:
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
    _lambda_arg(p, "Pagel's lambda: 'ml' (default) or a value in [0, 1]", default="ml")
    _format_arg(p, ["text", "csv", "json"], "output format (default text)")
    _output_arg(p)


def add_compare(sub: Sub) -> None:
    p = sub.add_parser(
        "compare",
        help="compare candidate models of y (sets of predictors) by AICc and Akaike weights",
    )
    _data_arg(p, "dataset folder (quantities and derived quantities by key) or a plain CSV")
    p.add_argument("--y", required=True, help="y quantity key or column")
    p.add_argument(
        "--model",
        action="append",
        required=True,
        metavar="X1[,X2...]",
        help="one candidate model: comma-separated predictors ('1': intercept only); "
        "repeat for each model",
    )
    p.add_argument(
        "--factor",
        metavar="COLUMN",
        default=None,
        help="categorical column in every model "
        "(treatment coding, first level in sorted order the reference)",
    )
    _x_linear_arg(p)
    p.add_argument(
        "--method",
        choices=["ols", "pgls"],
        default="ols",
        help="ols (default) or pgls (phylogenetic)",
    )
    _tree_arg(p)
    _lambda_arg(
        p,
        "Pagel's lambda for pgls: 'ml' (default, estimated in each model) or a value in [0, 1]",
    )
    p.add_argument(
        "--ci",
        type=float,
        default=0.95,
        metavar="LEVEL",
        help="confidence level of the coefficients (default 0.95)",
    )
    _log_arg(p, "log transform of y and every predictor (default 10)")
    _taxon_col_arg(p)
    _format_arg(p, ["text", "json"])
    _temperature_arg(p)


def add_cycles(sub: Sub) -> None:
    p = sub.add_parser(
        "cycles",
        help="strain cycles and work loops reduced from the traces of a dataset (traces.csv)",
    )
    _dataset_arg(p)
    _format_arg(p, ["text", "json", "csv"], "output format (default text)")
    p.add_argument(
        "--no-drift-removal",
        action="store_true",
        help="reduce the signals as recorded (no linear or quadratic drift subtracted)",
    )
    _output_arg(p)
    _temperature_arg(p)


def add_diff(sub: Sub) -> None:
    p = sub.add_parser(
        "diff", help="what changed between two versions of a dataset (exit 1 if any)"
    )
    p.add_argument("old", metavar="OLD", help="the earlier version: dataset folder or workbook")
    p.add_argument("new", metavar="NEW", help="the later version: dataset folder or workbook")
    _format_arg(p, ["text", "json", "html"])
    _output_arg(p)
    _temperature_arg(p)
    _seed_arg(p, "random seed of the fits (the same for both versions)")


def add_merge(sub: Sub) -> None:
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


def add_report(sub: Sub) -> None:
    p = sub.add_parser("report", help="full analysis: HTML report, figures and tables")
    _dataset_arg(p)
    _output_dir_arg(p)
    _seed_arg(p, None)
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument(
        "--since",
        metavar="OLD",
        default=None,
        help="an older version (folder or workbook): add a 'What changed' section",
    )
    _temperature_arg(p)


def add_export(sub: Sub) -> None:
    p = sub.add_parser("export", help="export to open data standards")
    _dataset_arg(p)
    p.add_argument(
        "--to",
        choices=["datapackage", "dwc"],
        required=True,
        help="Frictionless Data Package or Darwin Core MeasurementOrFact",
    )
    _output_dir_arg(p)


def add_demo(sub: Sub) -> None:
    p = sub.add_parser("demo", help="write the synthetic demo compilation and run the report on it")
    _output_dir_arg(p)
    _seed_arg(p)
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def _import_reading_args(p: argparse.ArgumentParser) -> None:
    """import: how the wide table is read."""
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
        help="the column headers are on row N, as the spreadsheet numbers it (title rows above "
        "are ignored); default: the first non-blank row",
    )
    p.add_argument(
        "--plus-minus",
        metavar="KIND",
        choices=["sd", "se", "ci95", "range_half"],
        default=None,
        help="split cells such as '12.5 ± 0.3' (also +/-, +-) into value and uncertainty of "
        "this kind: sd, se, ci95 or range_half",
    )


def add_import(sub: Sub) -> None:
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
        help="sources table to copy in (.csv, .tsv, .bib, .xlsx); "
        "default: stub rows needing a citation",
    )
    p.add_argument(
        "--map",
        metavar="FILE",
        default=None,
        help="header decisions: a map CSV (header,role,key,unit,basis) or an earlier import.toml",
    )
    _import_reading_args(p)
    p.add_argument(
        "--overwrite",
        action="store_true",
        help="write into an existing non-empty folder, replacing the tables an import writes",
    )
    _format_arg(p, ["text", "json"], None)


def add_template(sub: Sub) -> None:
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


def add_units(sub: Sub) -> None:
    p = sub.add_parser("units", help="list the quantity catalogue with canonical units")
    p.add_argument(
        "dataset",
        metavar="DATASET",
        nargs="?",
        default=None,
        help="include a dataset's own quantities",
    )
    _format_arg(p, ["text", "csv", "json"])


COMMANDS: tuple[Callable[[Sub], None], ...] = (
    add_check,
    add_audit,
    add_table,
    add_derive,
    add_fit,
    add_impute,
    add_compare,
    add_cycles,
    add_diff,
    add_merge,
    add_report,
    add_export,
    add_demo,
    add_import,
    add_template,
    add_units,
)
"""The command registrations, in the order ``comparo --help`` lists them."""
