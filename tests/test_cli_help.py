"""The help of every command, word for word: the command names, options and help texts are a
contract (docs/cli.md, 'Command line'). tests/cli_help/ holds the help each command printed
when that contract was last changed on purpose; a change to the parser that alters any of it
fails here. To change the contract, edit docs/cli.md and regenerate the files with
``python tests/test_cli_help.py``."""

from __future__ import annotations

import os
import sys
from pathlib import Path

import pytest

HELP = Path(__file__).parent / "cli_help"
WIDTH = "100"


def _helps() -> dict[str, str]:
    """The help text of the top-level parser ('comparo') and of each command, at 100 columns."""
    from comparo.cli.main import build_parser

    old = os.environ.get("COLUMNS")
    os.environ["COLUMNS"] = WIDTH
    try:
        parser = build_parser()
        sub = next(a for a in parser._actions if a.dest == "command")
        texts = {"comparo": parser.format_help()}
        texts.update({name: p.format_help() for name, p in sub.choices.items()})
    finally:
        if old is None:
            del os.environ["COLUMNS"]
        else:
            os.environ["COLUMNS"] = old
    return texts


def test_every_command_has_its_recorded_help():
    recorded = sorted(p.stem for p in HELP.glob("*.txt"))
    assert recorded == sorted(_helps()), "a command was added or removed"


@pytest.mark.parametrize("name", sorted(p.stem for p in HELP.glob("*.txt")))
def test_help_is_unchanged(name):
    assert _helps()[name] == (HELP / f"{name}.txt").read_text(encoding="utf-8")


if __name__ == "__main__":  # regenerate after a deliberate change of the contract
    for name, text in _helps().items():
        (HELP / f"{name}.txt").write_text(text, encoding="utf-8")
    sys.exit(0)
