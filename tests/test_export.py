"""comparo.report.exports: Frictionless Data Package and Darwin Core MeasurementOrFact;
comparo.base.csvsafe: formula-injection neutralisation."""

from __future__ import annotations

import json

import frictionless
import numpy as np
import pandas as pd
import pytest
from support import DEMO, run_main, tree_hash, write_dataset

import comparo
from comparo.base.csvsafe import neutralise, to_csv
from comparo.report.exports import DWC_TERMS, to_datapackage, to_dwc


@pytest.fixture(scope="module")
def demo_ds():
    return comparo.load(DEMO)


def test_datapackage_validates_with_frictionless(demo_ds, tmp_path):
    """The output is checked by the reference implementation of the Data Package
    standard (frictionless-py, https://specs.frictionlessdata.io/)."""
    res = to_datapackage(demo_ds, tmp_path / "dp")
    assert "datapackage.json" in res.files
    report = frictionless.validate(str(tmp_path / "dp" / "datapackage.json"))
    assert report.valid, report.flatten(["type", "note"])[:5]
    pkg = json.loads((tmp_path / "dp" / "datapackage.json").read_text())
    per = next(r for r in pkg["resources"] if r["name"] == "per_taxon")
    radius = next(f for f in per["schema"]["fields"] if f["name"] == "fiber_radius")
    assert radius["unit"] == "um" and radius["type"] == "number"


def test_round_trip_preserves_values_to_12_digits(demo_ds, tmp_path):
    to_datapackage(demo_ds, tmp_path / "dp")
    back = pd.read_csv(tmp_path / "dp" / "observations.csv", dtype={"obs_id": str})
    orig = demo_ds.observations
    assert list(back["obs_id"]) == list(orig["obs_id"])
    for col in ("value", "value_canonical", "uncertainty_canonical", "temperature_c"):
        a, b = orig[col].to_numpy(float), back[col].to_numpy(float)
        both = np.isfinite(a)
        assert (np.isfinite(b) == both).all()
        np.testing.assert_allclose(b[both], a[both], rtol=1e-12)
    tab = comparo.tabulate(demo_ds)
    tb = pd.read_csv(tmp_path / "dp" / "per_taxon.csv")
    np.testing.assert_allclose(tb["frequency_observed"], tab["frequency_observed"], rtol=1e-12)


def test_dwc_terms_and_values(demo_ds, tmp_path):
    to_dwc(demo_ds, tmp_path / "dwc")
    mof = pd.read_csv(tmp_path / "dwc" / "measurementorfact.csv", dtype=str, keep_default_na=False)
    assert list(mof.columns) == DWC_TERMS
    # one row per observation, then one per computed result of the demo's traces (TRACE_ID:quantity)
    traced = mof["measurementID"].str.contains(":")
    assert (~traced).sum() == len(demo_ds.observations)
    assert list(mof["measurementID"][~traced]) == list(demo_ds.observations["obs_id"])
    assert (
        traced.sum() > 0
        and mof.loc[traced, "measurementMethod"].str.contains("computed from: trace:").all()
    )
    row = mof[mof["measurementID"] == "DEMO-PROXY"].iloc[0]
    assert "proxy taxon" in row["measurementMethod"] and "synthetic" in row["bibliographicCitation"]
    assert float(mof["measurementValue"].iloc[0]) == demo_ds.observations["value"].iloc[0]


@pytest.mark.parametrize("cell", ["=1+1", "+cmd|' /C calc'!A0", "-2+3", "@SUM(A1)", "\tx", "\rx"])
def test_formula_cells_neutralised(cell):
    assert neutralise(cell) == "'" + cell


@pytest.mark.parametrize("cell", ["-3.5", "+2", "1e-3", "plain", "", 5.0, -2])
def test_numbers_and_plain_text_untouched(cell):
    assert neutralise(cell) == cell


def test_export_neutralises_injected_cells(tmp_path):
    rows = ["o1,Apis mellifera,body_mass,100,mg,,,,s1,=HYPERLINK(1),reported,,,"]
    folder = write_dataset(tmp_path / "inj", rows)
    proc = run_main("export", str(folder), "--to", "dwc", "-o", str(tmp_path / "out"))
    assert proc.returncode == 0, proc.stderr
    text = (tmp_path / "out" / "measurementorfact.csv").read_text()
    assert "locator: =HYPERLINK" in text  # inside a longer cell: harmless
    out = to_csv(pd.DataFrame({"a": ["=HYPERLINK(1)", "ok"], "b": [-1.5, 2.0]}))
    assert out.splitlines()[1] == "'=HYPERLINK(1),-1.5"


def test_export_leaves_inputs_and_replaces_only_on_success(tmp_path):
    folder = write_dataset(tmp_path / "ds")
    before = tree_hash(folder)
    out = tmp_path / "out"
    assert run_main("export", str(folder), "--to", "datapackage", "-o", str(out)).returncode == 0
    first = tree_hash(out)
    (folder / "observations.csv").write_text("obs_id\n")  # now invalid
    assert run_main("export", str(folder), "--to", "datapackage", "-o", str(out)).returncode == 2
    assert tree_hash(out) == first  # the failed export did not touch the old output
    assert before != tree_hash(folder)  # (we changed it ourselves above)
