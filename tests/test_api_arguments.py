"""The Python API refuses wrong arguments up front with the package's own error, naming the
argument and what it accepts (never a TypeError or AttributeError from deep inside), with the
bounds of the command line."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from support import DEMO, write_dataset

import comparo

TREE = str(DEMO / "tree.nwk")


@pytest.fixture(scope="module")
def ds(tmp_path_factory):
    return comparo.load(write_dataset(tmp_path_factory.mktemp("api") / "DS"))


@pytest.fixture(scope="module")
def table():
    """Five points on y = 2 x^0.5 (log10: slope 0.5), a label and a group column."""
    x = np.array([1.0, 4.0, 9.0, 16.0, 25.0])
    return pd.DataFrame(
        {
            "taxon": list("abcde"),
            "genus": list("ggghh"),
            "m": x,
            "f": 2 * np.sqrt(x) * [1, 1.01, 0.99, 1, 1.02],
        }
    )


def test_the_package_errors_are_public_and_related():
    assert issubclass(comparo.UsageError, comparo.ComparoError)
    assert issubclass(comparo.InputError, comparo.ComparoError)
    assert issubclass(comparo.ComparoError, Exception)
    assert {"UsageError", "ComparoError", "InputError"} <= set(comparo.__all__)


CASES = {
    "fit-table-none": (
        lambda t, d: comparo.fit(None, "m", "f"),
        ["table must be a pandas DataFrame", "NoneType"],
    ),
    "fit-table-folder": (
        lambda t, d: comparo.fit(str(DEMO), "m", "f"),
        ["table must be a pandas DataFrame", "comparo.tabulate"],
    ),
    "fit-ci-text": (
        lambda t, d: comparo.fit(t, "m", "f", ci="0.95"),
        ["ci (--ci) must be a number strictly between 0 and 1", "str '0.95'"],
    ),
    "fit-ci-one": (
        lambda t, d: comparo.fit(t, "m", "f", ci=1.0),
        ["ci (--ci) must be a number strictly between 0 and 1"],
    ),
    "fit-ci-bool": (lambda t, d: comparo.fit(t, "m", "f", ci=True), ["ci (--ci) must be a number"]),
    "fit-x-number": (lambda t, d: comparo.fit(t, 3, "f"), ["x must be a column name"]),
    "fit-y-list": (lambda t, d: comparo.fit(t, "m", ["f"]), ["y must be a column name"]),
    "fit-by-number": (
        lambda t, d: comparo.fit(t, "m", "f", by=1),
        ["by must be a column name (text) or None"],
    ),
    "fit-taxon-col-typo": (
        lambda t, d: comparo.fit(t, "m", "f", taxon_col="taxn"),
        ["taxon_col 'taxn' is not a column", "taxon, genus"],
    ),
    "fit-taxon-col-number": (
        lambda t, d: comparo.fit(t, "m", "f", taxon_col=0),
        ["taxon_col must be a column name"],
    ),
    "fit-bootstrap-text": (
        lambda t, d: comparo.fit(t, "m", "f", bootstrap="1000"),
        ["bootstrap must be a whole number"],
    ),
    "fit-bootstrap-float": (
        lambda t, d: comparo.fit(t, "m", "f", bootstrap=1e3),
        ["bootstrap must be a whole number"],
    ),
    "fit-bootstrap-negative": (
        lambda t, d: comparo.fit(t, "m", "f", bootstrap=-5),
        ["bootstrap must be 0 or a positive number"],
    ),
    "fit-bootstrap-cap": (
        lambda t, d: comparo.fit(t, "m", "f", bootstrap=10**12),
        ["exceeds this machine's cap"],
    ),
    "fit-seed-text": (
        lambda t, d: comparo.fit(t, "m", "f", seed="1"),
        ["seed must be a whole number"],
    ),
    "fit-method": (
        lambda t, d: comparo.fit(t, "m", "f", "median"),
        ["unknown method 'median'", "ols, sma"],
    ),
    "load-none": (lambda t, d: comparo.load(None), ["folder must be a path", "NoneType"]),
    "load-number": (lambda t, d: comparo.load(3), ["folder must be a path"]),
    "load-empty": (lambda t, d: comparo.load(""), ["folder must be a path, not empty text"]),
    "check-none": (lambda t, d: comparo.check(None), ["folder must be a path"]),
    "per-taxon-table": (lambda t, d: comparo.tabulate(t), ["ds must be a Dataset", "DataFrame"]),
    "audit-none": (lambda t, d: comparo.audit(None), ["ds must be a Dataset"]),
    "cycles-number": (lambda t, d: comparo.cycles(3), ["ds must be a Dataset or a dataset folder"]),
    "derive-settings-text": (
        lambda t, d: comparo.derive(comparo.tabulate(d), settings="x"),
        ["settings must be a mapping", "str 'x'"],
    ),
    "derive-table-none": (lambda t, d: comparo.derive(None), ["table must be a pandas DataFrame"]),
    "derive-dataset": (
        lambda t, d: comparo.derive(d),
        ["table must be a pandas DataFrame", "Dataset"],
    ),
    "derive-mc-float": (
        lambda t, d: comparo.derive(comparo.tabulate(d), mc=1e12),
        ["mc must be a whole number"],
    ),
    "derive-mc-cap": (
        lambda t, d: comparo.derive(comparo.tabulate(d), mc=10**12),
        ["mc 1000000000000 exceeds this machine's cap"],
    ),
    "derive-seed-negative": (
        lambda t, d: comparo.derive(comparo.tabulate(d), seed=-1),
        ["seed must be >= 0"],
    ),
    "phylo-tree-none": (
        lambda t, d: comparo.fit(t, "m", "f", "pgls", tree=None),
        ["tree must be a Newick file name", "NoneType"],
    ),
    "phylo-tree-number": (
        lambda t, d: comparo.fit(t, "m", "f", "pgls", tree=3),
        ["tree must be a Newick file name"],
    ),
    "phylo-table-none": (
        lambda t, d: comparo.fit(None, "m", "f", "pgls", tree=TREE),
        ["table must be a pandas DataFrame"],
    ),
    "fit-pgls-tree-none": (
        lambda t, d: comparo.fit(t, "m", "f", "pgls", tree=None),
        ["tree must be a Newick file name"],
    ),
    "sensitivity-mc-float": (
        lambda t, d: comparo.assess_sensitivity(t, "m", "f", mc=1e12),
        ["mc must be a whole number", "float"],
    ),
    "sensitivity-mc-cap": (
        lambda t, d: comparo.assess_sensitivity(t, "m", "f", mc=10**12),
        ["mc 1000000000000 exceeds this machine's cap", "point-draws per second"],
    ),
    "sensitivity-none": (
        lambda t, d: comparo.assess_sensitivity(None, "m", "f"),
        ["dataset_or_table must be a Dataset", "DataFrame"],
    ),
    "sensitivity-ci": (
        lambda t, d: comparo.assess_sensitivity(t, "m", "f", ci=95),
        ["ci must be a number strictly between 0 and 1"],
    ),
    "signal-tree-none": (
        lambda t, d: comparo.measure_signal(None, {"a": 1.0}),
        ["tree must be a Newick file name"],
    ),
    "signal-values-none": (
        lambda t, d: comparo.measure_signal(TREE, None),
        ["values must be a mapping of tip label to value"],
    ),
    "signal-permutations-float": (
        lambda t, d: comparo.measure_signal(TREE, {"a": 1.0}, permutations=99.0),
        ["permutations must be a whole number"],
    ),
    "signal-permutations-negative": (
        lambda t, d: comparo.measure_signal(TREE, {"a": 1.0}, permutations=-1),
        ["permutations must be 0 or a positive number"],
    ),
    "contrasts-tree-none": (
        lambda t, d: comparo.contrast(None, {}),
        ["tree must be a Newick file name"],
    ),
    "contrasts-values-list": (
        lambda t, d: comparo.contrast(TREE, [1.0, 2.0]),
        ["values must be a mapping"],
    ),
    "read-tree-none": (
        lambda t, d: comparo.read_tree(None),
        ["path_or_newick must be a Newick file name or Newick text"],
    ),
    "report-folder-none": (
        lambda t, d: comparo.build_report(None, "unused"),
        ["folder must be a path"],
    ),
    "report-out-none": (
        lambda t, d: comparo.build_report(str(DEMO), None),
        ["out_dir must be a path"],
    ),
    "report-draws-text": (
        lambda t, d: comparo.build_report(str(DEMO), "unused", sensitivity_draws="200"),
        ["sensitivity_draws must be a whole number"],
    ),
    "catalog-extra-text": (
        lambda t, d: comparo.load_catalog(extra="x"),
        ["extra must be a mapping"],
    ),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_a_wrong_argument_is_a_usage_error_naming_it(case, table, ds, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # nothing may be written: the folder stays empty
    call, words = CASES[case]
    with pytest.raises(comparo.UsageError) as err:
        call(table, ds)
    for w in words:
        assert w in str(err.value), str(err.value)
    assert list(tmp_path.iterdir()) == []


def test_the_default_label_column_may_be_absent(table):
    """Without a 'taxon' column (the default), points are named by row, as documented; a label
    column given by name must exist."""
    r = comparo.fit(table.drop(columns="taxon"), "m", "f", method="ols")
    assert r.points[0]["label"] == "row 2"
    assert [
        p["label"] for p in comparo.fit(table, "m", "f", method="ols", taxon_col="genus").points
    ][:2] == ["g", "g"]


def test_numpy_integers_are_whole_numbers(table):
    """A count from numpy (np.int64) is a whole number like a Python int."""
    r = comparo.fit(table, "m", "f", method="ols", bootstrap=np.int64(200), seed=3)
    assert r.bootstrap["resamples"] == 200


def test_a_valid_fit_matches_an_independent_least_squares(table):
    """OLS slope on log10 axes equals numpy.polyfit's (an independent reference)."""
    r = comparo.fit(table, "m", "f", method="ols", ci=np.float64(0.9))
    slope = np.polyfit(np.log10(table["m"]), np.log10(table["f"]), 1)[0]
    assert r.slope == pytest.approx(slope, rel=1e-12) and r.ci_level == 0.9
