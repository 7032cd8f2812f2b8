"""The naming rule of the Python API (docs/api.md): verbs taking a dataset accept a folder or a
``Dataset`` alike; the old names still answer, with a DeprecationWarning naming the new one;
``phylo_fit`` is ``fit(method="pgls")`` and its old dict keys still read, with a warning that
names the attribute. The numbers themselves are checked elsewhere against independent
references (dense GLS in tests/reference/test_phylo_reference.py); here two ways of asking
must give the same answer."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from support import DEMO

import comparo
from comparo import phylo

TREE = str(DEMO / "tree.nwk")
X, Y = "body_mass", "frequency_observed"
DOCS = Path(__file__).resolve().parents[1] / "docs" / "api.md"


@pytest.fixture(scope="module")
def values():
    """Four tips, the worked example's values of tests/test_phylo.py."""
    return "((A:1,B:1):1,(C:1.5,D:0.5):0.5);", {"A": 0.0, "B": 1.0, "C": 2.0, "D": 3.5}


# --------------------------------------------------------------------------- the rule, written


def test_every_public_name_and_error_is_in_the_api_page():
    text = DOCS.read_text(encoding="utf-8")
    for name in comparo.__all__:
        if name != "__version__":
            assert f"`{name}" in text or f"comparo.{name}" in text, name
    for err in ("ComparoError", "InputError", "UsageError"):
        assert err in comparo.__all__ and f"comparo.{err}" in text


def test_the_functions_are_verbs_and_the_results_nouns():
    """Every current function is listed under the naming rule of docs/api.md;
    every public class is named by a noun (capitalised, no verb prefix)."""
    from comparo import _RENAMED

    text = DOCS.read_text(encoding="utf-8")
    table = text.split("## The naming rule")[1].split("### Old names")[0]
    listed = set(re.findall(r"^- `(\w+)\(", table, re.M))
    assert len(listed) >= 18, listed
    for name in comparo.__all__:
        obj = getattr(comparo, name)
        if isinstance(obj, type):
            assert name[0].isupper(), name
        elif callable(obj) and name not in _RENAMED:
            assert name in listed, name


# --------------------------------------------------------------------------- path or Dataset


@pytest.mark.parametrize(
    "call",
    [
        lambda d: comparo.tabulate(d),
        lambda d: comparo.audit(d).to_dict(),
        lambda d: comparo.cycles(d).to_dict(),
        lambda d: comparo.check(d).to_dict()["problems"],
        lambda d: comparo.assess_sensitivity(d, X, Y, "ols", mc=0).to_dict(),
    ],
    ids=["tabulate", "audit", "cycles", "check", "assess_sensitivity"],
)
def test_a_folder_and_a_dataset_give_the_same_answer(call, demo_dataset):
    by_folder, by_dataset = call(DEMO), call(demo_dataset)
    if isinstance(by_folder, pd.DataFrame):
        pd.testing.assert_frame_equal(by_folder, by_dataset)
    else:
        assert by_folder == by_dataset


def test_a_folder_that_does_not_pass_is_an_input_error(tmp_path):
    (tmp_path / "observations.csv").write_text("obs_id,taxon\n", encoding="utf-8")
    with pytest.raises(comparo.InputError):
        comparo.audit(tmp_path)


# --------------------------------------------------------------------------- old names


@pytest.mark.parametrize(
    "old, new, call",
    [
        ("per_taxon", "tabulate", lambda f, ds, t, v: f(ds)),
        ("multiple_fit", "fit_multiple", lambda f, ds, t, v: f(t, Y, [X]).to_dict()),
        ("sensitivity", "assess_sensitivity", lambda f, ds, t, v: f(t, X, Y, mc=0).to_dict()),
        ("contrasts", "contrast", lambda f, ds, t, v: f(*v).to_dict()),
        ("tree_signal", "measure_signal", lambda f, ds, t, v: f(*v, permutations=9).to_dict()),
    ],
)
def test_an_old_name_warns_and_answers_as_the_new(old, new, call, demo_dataset, demo_table, values):
    args = demo_dataset, demo_table, values
    with pytest.warns(DeprecationWarning, match=f"comparo.{old} is renamed comparo.{new}"):
        got = call(getattr(comparo, old), *args)
    want = call(getattr(comparo, new), *args)
    if isinstance(want, pd.DataFrame):
        pd.testing.assert_frame_equal(got, want)
    else:
        assert got == want
    assert getattr(comparo, old).__name__ == old


def test_phylo_fit_is_fit_pgls_with_a_warning(demo_table):
    table = demo_table
    with pytest.warns(DeprecationWarning, match=r"fit\(table, x, y, method='pgls'"):
        old = comparo.phylo_fit(table, X, Y, tree=TREE, against=-0.25)
    new = comparo.fit(table, X, Y, "pgls", tree=TREE, against=-0.25)
    assert isinstance(old, comparo.FitResult)
    assert old.to_dict() == new.to_dict()


def test_the_old_keys_still_read_with_a_warning_naming_the_attribute(demo_table):
    """Every key of the dict phylo_fit returned (comparo.phylo.pgls) reads as before."""
    table = demo_table
    record = phylo.pgls(table, X, Y, tree=TREE, lambda_=0.8, tip_se=True)
    r = comparo.fit(table, X, Y, "pgls", tree=TREE, lambda_=0.8, tip_se=True)
    assert len(record) == 32
    for key, value in record.items():
        with pytest.warns(DeprecationWarning) as caught:
            got = r[key]
        message = str(caught[0].message)
        attr = {"lambda": "result.lambda_"}.get(key, f"result.{key}")
        assert attr in message or f"result.phylo[{key!r}]" in message, message
        if isinstance(value, float):
            assert got == pytest.approx(value, rel=1e-12)
        elif isinstance(value, list) and value and isinstance(value[0], float):
            np.testing.assert_allclose(got, value, rtol=1e-12)
        else:
            assert got == value, key
    with pytest.warns(DeprecationWarning, match=r"result\.slope\b"):
        assert r["slope"] == r.slope
    with pytest.warns(DeprecationWarning, match=r"result\.phylo\['sigma2'\]"):
        assert r["sigma2"] == r.phylo["sigma2"]
    with pytest.raises(KeyError):
        r["no such key"]
    with pytest.raises(TypeError):
        iter(r)  # indexing by key does not make a fit a sequence


def test_the_phylo_subpackage_old_name_warns(values):
    df = pd.DataFrame({"taxon": list("ABCD"), "x": [1.0, 2.0, 3.0, 4.5], "y": [0.5, 1.0, 2.5, 3]})
    with pytest.warns(DeprecationWarning, match="comparo.phylo.pgls"):
        old = phylo.phylo_fit(df, "x", "y", tree=values[0], log="none", lambda_=1.0)
    assert old == phylo.pgls(df, "x", "y", tree=values[0], log="none", lambda_=1.0)
