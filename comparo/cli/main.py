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

EXIT_OK, EXIT_INPUT, EXIT_INTERNAL = 0, 2, 3


def build_parser() -> argparse.ArgumentParser:
    """The parser of ``comparo`` and of every command (options: :mod:`comparo.cli.options`)."""
    from comparo.base.version import __version__
    from comparo.cli.options import COMMANDS, DefaultsFormatter

    parser = argparse.ArgumentParser(
        prog="comparo",
        description="Cross-taxa compilations of muscle mechanics: "
        "check, harmonise, derive, fit, report.",
        epilog="Run 'comparo COMMAND --help' for the options of one command.",
    )
    parser.add_argument("--version", action="version", version=f"comparo {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for register in COMMANDS:
        register(sub)
    for command in sub.choices.values():
        command.formatter_class = DefaultsFormatter
    return parser


def _guard_output(args: argparse.Namespace) -> None:
    """Refuse a bad seed, an output inside an input and wrong kinds of output path before any
    work."""
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
            f"comparo {args.command}: not enough memory for this run (the process could not "
            "allocate what it needs; see docs/cli.md, 'Limits'): use fewer draws or resamples, "
            "or a smaller input",
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
