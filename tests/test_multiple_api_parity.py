"""The Python API answers as the command line does for a fit with several predictors:
``comparo.fit_multiple(..., by=, bootstrap=)`` and ``comparo fit --x A --x B --by G`` /
``--bootstrap N --seed S`` give the same JSON parts (docs/api.md, docs/cli.md). The data are a
simulation of our own with a fixed seed; the numbers themselves are checked against
statsmodels in tests/test_multiple_resampling.py."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

import comparo
from comparo.cli.main import main


@pytest.fixture(scope="module")
def table_csv(tmp_path_factory):
    rng = np.random.default_rng(7)
    n = 40
    a, b = rng.lognormal(0, 1, n), rng.lognormal(0, 1, n)
    y = 2.0 * a**0.5 * b**-0.3 * rng.lognormal(0, 0.1, n)
    frame = pd.DataFrame(
        {"taxon": [f"t{i}" for i in range(n)], "a": a, "b": b, "y": y, "g": ["p", "q"] * (n // 2)}
    )
    path = tmp_path_factory.mktemp("api") / "t.csv"
    frame.to_csv(path, index=False)
    return path, frame


def _cli(path, *extra, capsys):
    argv = ["fit", str(path), "--y", "y", "--x", "a", "--x", "b", "--method", "ols"]
    assert main([*argv, *extra, "--format", "json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_by_gives_the_cli_answer(table_csv, capsys):
    path, frame = table_csv
    cli = _cli(path, "--by", "g", capsys=capsys)
    api = comparo.fit_multiple(frame, "y", ["a", "b"], method="ols", by="g").to_dict()
    assert api["by"] == cli["by"]


def test_bootstrap_gives_the_cli_answer(table_csv, capsys):
    path, frame = table_csv
    cli = _cli(path, "--bootstrap", "200", "--seed", "5", capsys=capsys)
    fit = comparo.fit_multiple(frame, "y", ["a", "b"], method="ols", bootstrap=200, seed=5)
    assert fit.to_dict()["resampling"] == cli["resampling"]


def test_by_with_a_factor_is_refused_as_on_the_command_line(table_csv):
    _, frame = table_csv
    with pytest.raises(comparo.UsageError, match="give one"):
        comparo.fit_multiple(frame, "y", ["a", "b"], factor="g", by="g")
