"""Shared fixtures (built on tests/support.py)."""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest
from support import DEMO, write_dataset

from comparo.base import errors

# every Problem built by the tests (and by the comparo processes they start) must carry a rule
# id of comparo.base.rules; set before comparo is imported, so errors.CHECK_RULES reads it
os.environ["COMPARO_CHECK_RULES"] = "1"
errors.CHECK_RULES = True  # in case comparo was imported before this file


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
    from comparo.pipeline import build_report

    base = tmp_path_factory.mktemp("demo-report")
    data = base / "demo"
    shutil.copytree(DEMO, data)
    result = build_report(data, base / "out", seed=7)
    return data, base / "out", result


@pytest.fixture(scope="module")
def demo_dataset():
    """The demo dataset loaded (comparo.load), read-only for the tests of a module."""
    import comparo

    return comparo.load(DEMO)


@pytest.fixture(scope="module")
def demo_table(demo_dataset):
    """The demo's per-taxon table (comparo.tabulate), read-only for the tests of a module."""
    import comparo

    return comparo.tabulate(demo_dataset)


# Session fixtures that are costly to build (seconds each), and the xdist group of the
# tests that use them: with ``--dist loadgroup`` each group runs on one worker, so the
# fixture is built once per run instead of once per worker.
_SHARED_FIXTURE_GROUPS = {"demo_report": "demo_report"}


@pytest.hookimpl(tryfirst=True)  # before pytest-xdist reads the groups off the marks
def pytest_collection_modifyitems(config, items):
    """Put every test that uses a shared costly fixture (directly or through another
    fixture) in that fixture's xdist group; the others are spread over the workers."""
    for item in items:
        for fixture, group in _SHARED_FIXTURE_GROUPS.items():
            if fixture in getattr(item, "fixturenames", ()):
                item.add_marker(pytest.mark.xdist_group(group))


# the dead-code whitelist is read by vulture, never imported by pytest (--doctest-modules)
collect_ignore = ["vulture_whitelist.py"]
