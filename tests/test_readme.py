"""The README's tour stays true: every command in it parses, and its paths are the ones
``comparo demo -o out/`` writes (the demo itself is run in tests/test_demo.py)."""

from __future__ import annotations

import re
import shlex

from support import ROOT

from comparo.cli.main import build_parser


def _tour() -> list[list[str]]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    block = text.split("## A short tour", 1)[1].split("```", 2)[1]
    lines = [re.sub(r"\s+#.*$", "", ln).strip() for ln in block.splitlines()]
    return [shlex.split(ln)[1:] for ln in lines if ln.startswith("comparo ")]


def test_every_tour_command_parses():
    parser = build_parser()
    tour = _tour()
    assert len(tour) >= 8
    for argv in tour:
        args = parser.parse_args(argv)
        assert args.command == argv[0]


def test_tour_uses_the_folder_the_demo_writes():
    tour = _tour()
    assert tour[0][:3] == ["demo", "-o", "out/"]
    datasets = {a for argv in tour[1:] for a in argv if a.startswith("out/")}
    assert datasets == {"out/synthetic_cyclers"}
    assert not any("demo_tables" in a for argv in tour for a in argv)
