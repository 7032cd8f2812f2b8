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



@pytest.fixture(scope="session")
def demo_report(tmp_path_factory) -> tuple[Path, Path, object]:
    """The demo report built once per test process (seed 7), read-only for the tests that
    share it: (data folder, output folder, :class:`comparo.report.ReportResult`)."""
    from comparo.report import build_report

    base = tmp_path_factory.mktemp("demo-report")
    data = base / "demo"
    shutil.copytree(DEMO, data)
    result = build_report(data, base / "out", seed=7)
    return data, base / "out", result
