"""comparo.curation.harmonise: synonyms, temperature, duplicates, slips, conflicts, per-taxon table;
comparo.curation.provenance: row accounting and the audit contract."""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from support import SOURCES, demo_taxa, run_main, write_dataset

import comparo
from comparo.curation.aggregation import per_taxon
from comparo.curation.harmonise import harmonise
from comparo.pipeline import audit

HDR = (
    "obs_id,taxon,quantity,value,unit,uncertainty,uncertainty_kind,n,source_id,locator,basis,"
    "inputs,proxy_taxon,temperature_c"
)


def _ds(tmp_path, rows, taxa=None, settings_text=None):
    folder = write_dataset(tmp_path / "d", rows, header=HDR)
    if taxa:
        (folder / "taxa.csv").write_text(taxa)
    if settings_text:
        (folder / "comparo.toml").write_text(settings_text)
    return comparo.load(folder, strict=False)


def test_inverse_variance_mean_and_uncertainty(tmp_path):
    """Weighted mean sum(v/u^2)/sum(1/u^2) and u = 1/sqrt(sum 1/u^2) (numpy as the independent
    route)."""
    rows = [
        "a,Apis mellifera,fiber_radius,10,um,1,se,,s1,T1,reported,,,",
        "b,Apis mellifera,fiber_radius,11,um,2,se,,s2,T2,reported,,,",
    ]
    tab = per_taxon(_ds(tmp_path, rows))
    v, u = np.array([10.0, 11.0]), np.array([1.0, 2.0])
    w = 1 / u**2
    assert tab["fiber_radius"].iat[0] == pytest.approx(np.sum(w * v) / np.sum(w))
    assert tab["fiber_radius_u"].iat[0] == pytest.approx(1 / np.sqrt(np.sum(w)))
    assert tab["fiber_radius_n"].iat[0] == 2 and tab["fiber_radius_nsrc"].iat[0] == 2
    assert tab["fiber_radius_obs"].iat[0] == "a;b"


def test_n_weighted_mean_without_uncertainties_and_median(tmp_path):
    rows = [
        "a,Apis mellifera,fiber_radius,10,um,,,3,s1,T1,reported,,,",
        "b,Apis mellifera,fiber_radius,20,um,,,1,s2,T2,digitized,,,",
        "c,Apis mellifera,fiber_radius,12,um,,,,s2,T3,reported,,,",
    ]
    ds = _ds(tmp_path, rows)
    tab = per_taxon(ds)
    assert tab["fiber_radius"].iat[0] == pytest.approx((3 * 10 + 20 + 12) / 5)
    assert tab["fiber_radius_basis"].iat[0] == "digitized"  # the weakest basis
    assert per_taxon(ds, aggregate="median")["fiber_radius"].iat[0] == pytest.approx(12.0)


def test_units_converted_and_diameter_halved(tmp_path):
    rows = [
        "a,Apis mellifera,fiber_diameter,0.04,mm,,,,s1,T1,reported,,,",
        "b,Apis mellifera,body_mass,250,mg,,,,s1,T1,reported,,,",
    ]
    tab = per_taxon(_ds(tmp_path, rows))
    assert tab["fiber_radius"].iat[0] == pytest.approx(20.0)  # µm
    assert tab["fiber_radius_basis"].iat[0] == "computed"
    assert tab["body_mass"].iat[0] == pytest.approx(2.5e-4)  # kg


def test_temperature_normalised_or_left_alone(tmp_path):
    rows = [
        "a,Apis mellifera,attach_rate,100,1/s,,,,s1,T1,reported,,,15",
        "b,Apis mellifera,detach_rate,100,1/s,,,,s1,T1,reported,,,",
    ]
    ds = _ds(
        tmp_path, rows, settings_text="reference_temperature_c = 25\n[q10]\nattach_rate = 2.0\n"
    )
    tab = per_taxon(ds)
    assert tab["attach_rate"].iat[0] == pytest.approx(200.0)
    assert tab["detach_rate"].iat[0] == pytest.approx(100.0)  # no temperature: un-normalised
    assert per_taxon(ds, temperature=False)["attach_rate"].iat[0] == pytest.approx(100.0)
    rep = audit(ds)
    assert rep.temperature["without_temperature"] == ["b"]


def test_q10_and_activation_energy_used_are_recorded_per_row_and_per_quantity(tmp_path):
    """Each normalised row records the Q10 or activation energy applied; the factors equal the
    textbook forms Q10^((T_ref - T)/10) and exp(-Ea/R (1/T_ref - 1/T)) with T in kelvin and R =
    8.314462618 J/(mol K) (CODATA 2018 molar gas constant), written here independently;
    temperature_rules groups them per quantity."""
    from comparo.curation.provenance import lineage, temperature_rules

    rows = [
        "a,Apis mellifera,attach_rate,100,1/s,,,,s1,T1,reported,,,15",
        "b,Apis mellifera,detach_rate,100,1/s,,,,s1,T1,reported,,,",
        "c,Bombus terrestris,attach_rate,80,1/s,,,,s1,T2,reported,,,35",
        "d,Bombus terrestris,frequency_observed,150,Hz,,,,s1,T3,reported,,,20",
        "e,Apis mellifera,body_mass,100,mg,,,,s1,T1,reported,,,",
    ]
    settings = (
        "reference_temperature_c = 25\n[q10]\nattach_rate = 2.0\n"
        "[activation_energy_kj_mol]\nfrequency_observed = 50.0\n"
    )
    ds = _ds(tmp_path, rows, settings_text=settings)
    h = harmonise(ds)
    r = h.rows.set_index("obs_id")
    assert r.loc["a", "q10_used"] == 2.0 and r.loc["a", "temperature_factor"] == pytest.approx(
        2.0**1.0
    )
    assert r.loc["c", "temperature_factor"] == pytest.approx(2.0**-1.0)
    arr = np.exp(-50e3 / 8.314462618 * (1 / 298.15 - 1 / 293.15))
    assert r.loc["d", "ea_kj_mol_used"] == 50.0 and np.isnan(r.loc["d", "q10_used"])
    assert r.loc["d", "temperature_factor"] == pytest.approx(arr, rel=1e-6)
    assert (
        np.isnan(r.loc["b", "q10_used"])
        and np.isnan(r.loc["e", "q10_used"])
        and np.isnan(r.loc["e", "ea_kj_mol_used"])
    )
    assert {"q10_used", "ea_kj_mol_used"} <= set(lineage(ds, harmonised=h).columns)
    rules = temperature_rules(h).set_index("quantity_key")
    assert rules.loc["attach_rate", "rule"] == "Q10" and rules.loc["attach_rate", "rows"] == 2
    assert rules.loc["attach_rate", "factor_min"] == pytest.approx(0.5) and rules.loc[
        "attach_rate", "factor_max"
    ] == pytest.approx(2.0)
    assert (
        rules.loc["frequency_observed", "rule"] == "Arrhenius"
        and rules.loc["frequency_observed", "ea_kj_mol"] == 50.0
    )
    assert rules.loc["detach_rate", "rule"] == "none"  # no temperature given: used un-normalised
    assert set(rules["reference_temperature_c"]) == {25.0} and "body_mass" not in rules.index
    off = harmonise(ds, temperature=False).rows
    assert off["q10_used"].isna().all() and off["ea_kj_mol_used"].isna().all()


def test_synonyms_map_to_accepted_names(tmp_path):
    rows = [
        "a,Apis mellifera,body_mass,100,mg,,,,s1,T1,reported,,,",
        "b,Apis mellifica,fiber_radius,10,um,,,,s1,T1,reported,,,",
    ]
    taxa = "taxon,accepted_name,clade\nApis mellifera,,bees\nApis mellifica,Apis mellifera,bees\n"
    tab = per_taxon(_ds(tmp_path, rows, taxa=taxa))
    assert list(tab["taxon"]) == ["Apis mellifera"]
    assert tab["clade"].iat[0] == "bees"
    assert tab["fiber_radius"].iat[0] == 10


def test_duplicates_merged_not_double_counted(tmp_path):
    rows = [
        "a,Apis mellifera,fiber_radius,10,um,,,,s1,Table 1,reported,,,",
        "b,Apis mellifera,fiber_radius,10,um,,,,s1,table 1,reported,,,",
    ]
    ds = _ds(tmp_path, rows)
    tab = per_taxon(ds)
    assert tab["fiber_radius_n"].iat[0] == 1
    rep = audit(ds)
    assert rep.rows_merged == 1 and rep.merged[0]["into"] == "a"


def test_conflict_with_and_without_uncertainty(tmp_path):
    rows = [
        "a,Apis mellifera,fiber_radius,10,um,0.5,se,,s1,T1,reported,,,",
        "b,Apis mellifera,fiber_radius,14,um,0.5,se,,s2,T2,reported,,,",
        "c,Bombus terrestris,fiber_radius,10,um,,,,s1,T1,reported,,,",
        "d,Bombus terrestris,fiber_radius,14,um,,,,s2,T2,reported,,,",
    ]
    conflicts = harmonise(_ds(tmp_path, rows)).conflicts
    assert [c["taxon"] for c in conflicts] == [
        "Apis mellifera"
    ]  # 14/10 < 1.5 without uncertainties
    assert conflicts[0]["obs_ids"] == ["a", "b"] and conflicts[0]["sources"] == ["s1", "s2"]


def test_unit_slip_flagged_with_likely_unit(tmp_path):
    rows = [
        f"r{i},Apis sp{chr(97 + i)}a,fiber_radius,{v},um,,,,s1,T1,reported,,,"
        for i, v in enumerate([20, 25, 18, 30, 22, 0.024])
    ]
    h = harmonise(_ds(tmp_path, rows))
    assert [(s["obs_id"], s["likely_unit"]) for s in h.unit_slips] == [("r5", "mm")]
    rep = audit(_ds(tmp_path, rows))
    assert rep.rows_excluded[0]["obs_id"] == "r5" and "mm" in rep.rows_excluded[0]["reason"]


def test_error_rows_are_excluded_with_reason(tmp_path):
    rows = [
        "a,Apis mellifera,fiber_radius,10,um,,,,s1,T1,reported,,,",
        "b,Apis mellifera,fiber_radius,10,kPa,,,,s1,T2,reported,,,",
    ]
    rep = audit(_ds(tmp_path, rows))
    assert rep.balanced
    assert rep.rows_excluded == [
        {"obs_id": "b", "row": 3, "reason": rep.rows_excluded[0]["reason"]}
    ]
    assert rep.rows_excluded[0]["reason"].startswith("unit-dimension")


def test_audit_json_contract(tmp_path):
    folder = write_dataset(tmp_path / "j")
    proc = run_main("audit", str(folder), "--format", "json")
    assert proc.returncode == 0, proc.stderr
    d = json.loads(proc.stdout)
    for key in (
        "rows_read",
        "rows_used",
        "rows_merged",
        "rows_excluded",
        "conflicts",
        "unit_slips",
        "out_of_range",
        "basis_shares",
        "sources",
        "coverage",
    ):
        assert key in d
    assert d["rows_used"] + d["rows_merged"] + len(d["rows_excluded"]) == d["rows_read"]
    assert d["sources"]["s1"] == {
        "values": 2,
        "taxa": 1,
        "quantities": ["body_mass", "fiber_radius"],
    }
    assert d["coverage"]["Apis mellifera"]["frequency_observed"] == "digitized"
    assert abs(sum(d["basis_shares"]["body_mass"].values()) - 1) < 1e-12


def test_table_command_csv(tmp_path):
    folder = write_dataset(tmp_path / "t")
    out = tmp_path / "per_taxon.csv"
    proc = run_main("table", str(folder), "-o", str(out))
    assert proc.returncode == 0, proc.stderr
    import pandas as pd

    tab = pd.read_csv(out)
    assert list(tab["taxon"]) == ["Apis mellifera", "Bombus terrestris"]
    assert {
        "fiber_radius",
        "fiber_radius_u",
        "fiber_radius_n",
        "fiber_radius_basis",
        "fiber_radius_obs",
    } <= set(tab.columns)


values = st.sampled_from(["10", "12", "0", "-1", "abc", "1e3", "10"])
units_ = st.sampled_from(["um", "mm", "kPa", "um"])
locs = st.sampled_from(["T1", "T2"])


@settings(
    max_examples=30, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(
    st.lists(
        st.tuples(
            st.sampled_from(["Apis mellifera", "Bombus terrestris"]),
            values,
            units_,
            locs,
            st.sampled_from(["s1", "s2", "s3"]),
        ),
        min_size=1,
        max_size=15,
    )
)
def test_property_row_accounting(tmp_path_factory, rows):
    """rows read = used + merged + excluded, for any table (valid or not)."""
    lines = [
        f"o{i},{t},fiber_radius,{v},{u},,,,{s},{loc},reported,,,"
        for i, (t, v, u, loc, s) in enumerate(rows)
    ]
    folder = write_dataset(tmp_path_factory.mktemp("acc"), lines, header=HDR, sources=SOURCES)
    rep = audit(comparo.load(folder, strict=False))
    assert rep.rows_read == len(rows)
    assert rep.balanced


def test_demo_audit_finds_every_planted_fault():
    from support import DEMO

    rep = audit(comparo.load(DEMO))
    assert rep.balanced
    assert {"obs_id": "DEMO-SLIP", "likely_unit": "mm"}.items() <= rep.unit_slips[0].items()
    assert any(set(c["obs_ids"]) == {"DEMO-CONFLICT-A", "DEMO-CONFLICT-B"} for c in rep.conflicts)
    assert any(m["obs_id"] == "DEMO-DUP" for m in rep.merged)
    assert rep.basis_shares["lattice_spacing_d10"].get("proxy", 0) > 0
    assert rep.basis_shares["frequency_observed"].get("digitized", 0) > 0
    assert "DEMO-NOTEMP" in rep.rows_missing_temperature
    assert len(comparo.tabulate(comparo.load(DEMO))) == len(rep.coverage) == demo_taxa()
    assert set(rep.trust.values()) <= {"firm", "read-off", "borrowed", "contested", "sparse"}


def test_trust_grade_order():
    from comparo.curation.provenance import trust_grade

    assert trust_grade({"a": "reported", "b": "proxy"}, contested=True) == "contested"
    assert (
        trust_grade({"a": "reported", "b": "proxy", "c": "digitized"}, contested=False)
        == "borrowed"
    )
    assert (
        trust_grade({"a": "reported", "b": "digitized", "c": "reported"}, contested=False)
        == "read-off"
    )
    assert trust_grade({"a": "reported"}, contested=False) == "sparse"
    assert (
        trust_grade({"a": "reported", "b": "computed", "c": "reported"}, contested=False) == "firm"
    )


def test_sources_uncited_and_missing(tmp_path):
    rows = [
        "a,Apis mellifera,fiber_radius,10,um,,,,s1,T1,reported,,,",
        "b,Apis mellifera,body_mass,1,g,,,,s9,T1,reported,,,",
    ]
    rep = audit(_ds(tmp_path, rows))
    assert rep.sources_uncited == ["s2"] and rep.sources_missing == ["s9"]


def test_audit_report_notebook_views(tmp_path):
    """The audit shows itself in a notebook as a compact table whose counts are the
    attributes (and add up), with to_frame() and to_dict() beside it."""
    folder = write_dataset(tmp_path / "d")
    rep = audit(comparo.load(folder))
    counts = rep.counts_frame().set_index("count")["value"]
    assert counts["rows read"] == rep.rows_read == 6
    assert (
        counts["rows used"] + counts["rows merged (duplicates)"] + counts["rows excluded"]
        == counts["rows read"]
    )
    html = rep._repr_html_()
    assert html.count("<tr") == len(counts) + 1 and "balanced" in html
    assert list(rep.to_frame()["taxon"]) == sorted(rep.coverage)
    json.dumps(rep.to_dict())


def test_standard_uncertainty_of_a_ci95_uses_student_t_with_n_minus_1():
    """ci95 half-width / t(0.975, n - 1) (GUM G.3; quantile from scipy.stats, an independent
    route from the scipy.special function comparo calls); 1.96 when n is unknown or below 2;
    sd / sqrt(n); range_half / sqrt(3) (GUM 4.3.7)."""
    import math

    import pandas as pd
    from scipy import stats

    from comparo.curation.harmonise import standard_uncertainty

    u = pd.Series([2.0, 2.0, 2.0, 2.0, 3.0, 1.5])
    kind = pd.Series(["ci95", "ci95", "ci95", "sd", "range_half", "se"])
    n = pd.Series([5.0, None, 1.0, 4.0, None, None])
    out = standard_uncertainty(u, kind, n)
    assert out[0] == pytest.approx(2.0 / stats.t.ppf(0.975, 4), rel=1e-12)
    assert out[1] == pytest.approx(2.0 / stats.norm.ppf(0.975), rel=1e-12)
    assert out[2] == pytest.approx(2.0 / stats.norm.ppf(0.975), rel=1e-12)
    assert out[3] == pytest.approx(1.0)
    assert out[4] == pytest.approx(3.0 / math.sqrt(3.0))
    assert out[5] == 1.5
    no_n = standard_uncertainty(u[:2], kind[:2], pd.Series([None, None]))
    assert no_n.tolist() == pytest.approx([2.0 / 1.959963984540054] * 2)
