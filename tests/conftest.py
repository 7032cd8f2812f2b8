"""Shared fixtures (built on tests/support.py)."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
from support import DEMO, write_dataset


@pytest.fixture
def tiny(tmp_path: Path) -> Path:
    return write_dataset(tmp_path / "tiny")


@pytest.fixture
def demo_copy(tmp_path: Path) -> Path:
    dst = tmp_path / "demo"
    shutil.copytree(DEMO, dst)
    return dst

