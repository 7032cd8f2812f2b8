"""Every public result has one shape (docs/api.md, "Results"): ``summary()`` text,
``to_dict()`` that the strict JSON of RFC 8259 can hold (no NaN, no infinity: Python's
``json.dumps(..., allow_nan=False)``), ``to_frame()`` a pandas DataFrame and ``_repr_html_()``
one HTML table (the notebook display protocol of IPython's rich display), built on the
synthetic demo dataset (tests/support.py)."""

from __future__ import annotations

import json
import shutil
from html.parser import HTMLParser

import pandas as pd
import pytest
from support import DEMO

import comparo
from comparo.base.results import Result, ResultLike
from comparo.fitting.multiple_sensitivity import multiple_sensitivity

TREE = str(DEMO / "tree.nwk")
X, Y = "body_mass", "frequency_observed"


@pytest.fixture(scope="module")
def values(demo_dataset, demo_table):
    """log body mass per tree tip (the demo's taxa.csv tree labels)."""
    import numpy as np

    labels = demo_dataset.taxa.set_index("taxon")["tree_label"]
    t = demo_table.dropna(subset=[X])
    return {labels[n]: float(np.log10(v)) for n, v in zip(t["taxon"], t[X], strict=True)}


def _merge(ds, tmp_path):
    for side in ("a", "b"):
        shutil.copytree(DEMO, tmp_path / side, ignore=shutil.ignore_patterns("trace*"))
    return comparo.merge(tmp_path / "a", comparo.load(tmp_path / "b"), out=tmp_path / "OUT")


# public result class -> how to get one from the public API
MAKERS = {
    "Dataset": lambda ds, t, v, tmp: ds,
    "CheckResult": lambda ds, t, v, tmp: comparo.check(DEMO),
    "Catalog": lambda ds, t, v, tmp: comparo.load_catalog(),
    "AuditReport": lambda ds, t, v, tmp: comparo.audit(ds),
    "FitResult": lambda ds, t, v, tmp: comparo.fit(t, X, Y, "ols", by="clade", drop_flagged=True),
    "FitResult-pgls": lambda ds, t, v, tmp: comparo.fit(t, X, Y, "pgls", tree=TREE),
    "MultipleFit": lambda ds, t, v, tmp: comparo.fit_multiple(t, Y, [X], factor="clade"),
    "Comparison": lambda ds, t, v, tmp: comparo.compare(t, Y, [X, [X, "fiber_radius"]]),
    "SensitivityResult": lambda ds, t, v, tmp: comparo.assess_sensitivity(ds, X, Y, "ols", mc=20),
    "MultipleSensitivity": lambda ds, t, v, tmp: multiple_sensitivity(ds, Y, [X, "fiber_radius"]),
    "Contrasts": lambda ds, t, v, tmp: comparo.contrast(TREE, v),
    "SignalResult": lambda ds, t, v, tmp: comparo.measure_signal(TREE, v, permutations=19),
    "TraceSet": lambda ds, t, v, tmp: comparo.cycles(ds),
    "Imputation": lambda ds, t, v, tmp: comparo.impute(ds, X),
    "VersionDiff": lambda ds, t, v, tmp: comparo.diff(DEMO, ds),
    "MergeResult": lambda ds, t, v, tmp: _merge(ds, tmp),
}


class _Tables(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)


def _check_protocol(result) -> None:
    assert isinstance(result, Result) and isinstance(result, ResultLike)
    text = result.summary()
    assert isinstance(text, str) and text.strip()
    d = result.to_dict()
    assert isinstance(d, dict) and d
    assert json.loads(json.dumps(d, allow_nan=False)) == d  # strict JSON, keys as text
    frame = result.to_frame()
    assert isinstance(frame, pd.DataFrame)
    html = result._repr_html_()
    parser = _Tables()
    parser.feed(html)
    assert parser.tags.count("table") == 1, html[:200]


@pytest.mark.parametrize("kind", sorted(MAKERS))
def test_every_public_result_follows_the_protocol(kind, demo_dataset, demo_table, values, tmp_path):
    result = MAKERS[kind](demo_dataset, demo_table, values, tmp_path)
    assert type(result).__name__ == kind.split("-")[0]
    _check_protocol(result)


def test_the_report_result_follows_the_protocol(demo_report):
    _check_protocol(demo_report[2])


def test_every_class_a_public_function_returns_is_covered():
    """The classes named in the return annotations of the public functions are all in MAKERS
    (or the report result, tested above)."""
    import inspect

    covered = {k.split("-")[0] for k in MAKERS} | {"ReportResult"}
    for name in comparo.__all__:
        obj = getattr(comparo, name)
        if callable(obj) and not isinstance(obj, type):
            ret = str(inspect.signature(obj).return_annotation).strip("'\"")
            if ret[:1].isupper() and ret not in ("Any",):
                head = ret.split("[")[0].split(".")[-1]
                assert head in covered | {"FitResult"}, (name, ret)


def test_a_class_without_to_dict_says_so():
    class Bare(Result):
        pass

    with pytest.raises(NotImplementedError, match="Bare does not define to_dict"):
        Bare().summary()


def test_the_defaults_read_to_dict():
    """A result that defines only to_dict gets text, a one-row frame and one HTML table."""

    class Only(Result):
        def to_dict(self):
            return {"n": 3, "slope": float("nan"), "fit": {"r2": 0.5}}

    r = Only()
    assert r.summary().splitlines() == ["Only", "  n: 3", "  slope: nan"]
    frame = r.to_frame()
    assert list(frame.columns) == ["n", "slope", "fit.r2"] and frame["slope"].isna().all()
    assert "<table>" in r._repr_html_() and "fit.r2" in r._repr_html_()
