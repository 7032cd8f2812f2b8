"""No dead code in comparo/: the dead-code scan vulture (confidence 60 and above, its
documented threshold for unused functions, classes and variables) finds nothing beyond the
names listed, with their reasons, in tests/vulture_whitelist.py."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def test_vulture_finds_no_dead_code():
    pytest.importorskip("vulture")
    out = subprocess.run(
        [
            sys.executable,
            "-m",
            "vulture",
            str(ROOT / "comparo"),
            str(ROOT / "tests" / "vulture_whitelist.py"),
            "--min-confidence",
            "60",
        ],
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert out.returncode == 0, "dead code (remove it, or list it with its reason):\n" + out.stdout


def test_vulture_sees_a_dead_function(tmp_path):
    """The scan itself works: an unused function in a scratch module is reported."""
    pytest.importorskip("vulture")
    (tmp_path / "m.py").write_text(
        "def used():\n    return 1\n\n\ndef never():\n    return 2\n\n\nused()\n"
    )
    out = subprocess.run(
        [sys.executable, "-m", "vulture", str(tmp_path), "--min-confidence", "60"],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert "never" in out.stdout and "used'" not in out.stdout
