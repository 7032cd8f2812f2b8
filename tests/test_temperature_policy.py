"""The temperature policy (docs/methods/temperature.md): who is normalised, to which
temperature, with which Q10, and where it shows (per-taxon table, check, fit).

The independent route in every numeric check is the standard Q10 rule (common practice):
Q10 = (R2/R1)^(10/(T2 - T1)), i.e. R2 = R1 * Q10^((T2 - T1)/10), written out in each test
from the rows' own numbers, not from comparo's code."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from support import run_main

from comparo.curation.aggregation import per_taxon
from comparo.curation.harmonise import harmonise
from comparo.validation.dataset import load
from comparo.validation.tables import check

OBS = """obs_id,taxon,quantity,value,unit,source_id,locator,basis,temperature_c,preparation,q10
b1,Columba livia,body_mass,0.4,kg,s1,T1,reported,,,
b2,Columba livia,frequency_observed,7,Hz,s1,T1,reported,40,in_vivo,
b3,Columba livia,attach_rate,50,1/s,s1,T2,reported,15,skinned_fiber,
m1,Myotis lucifugus,body_mass,8,g,s1,T1,reported,,,
m2,Myotis lucifugus,frequency_observed,12,Hz,s1,T1,reported,38,,
m3,Myotis lucifugus,frequency_observed,11,Hz,s1,T3,reported,36,in_vivo,
h1,Bombus terrestris,body_mass,200,mg,s1,T1,reported,,,
h2,Bombus terrestris,frequency_observed,150,Hz,s1,T1,reported,36,in_vivo,
h3,Bombus terrestris,frequency_observed,120,Hz,s1,T4,reported,28,in_vivo,
h4,Bombus terrestris,attach_rate,80,1/s,s1,T2,reported,20,skinned_fiber,2.5
l1,Locusta migratoria,body_mass,2,g,s1,T1,reported,,,
l2,Locusta migratoria,frequency_observed,20,Hz,s1,T1,reported,30,in_vivo,
l3,Locusta migratoria,attach_rate,40,1/s,s1,T2,reported,15,skinned_fiber,
"""
TAXA = """taxon,clade,thermoregulation,operating_temperature_c
Columba livia,Aves,endotherm,40
Myotis lucifugus,Chiroptera,endotherm,
Bombus terrestris,Hymenoptera,heterotherm,36
Locusta migratoria,Orthoptera,ectotherm,30
"""
SOURCES = "source_id,citation,year\ns1,Invented (2020) a made-up source,2020\n"
Q10_FREQ, Q10_ATTACH = (
    2.0,
    2.5,
)  # catalogue defaults of frequency_observed and attach_rate (schema/quantities.toml)


def q10_rule(r1: float, t1: float, t2: float, q10: float) -> float:
    """R2 from R1 by the standard rule Q10 = (R2/R1)^(10/(T2 - T1)) (common practice)."""
    return r1 * q10 ** ((t2 - t1) / 10.0)


def dataset(tmp_path: Path, settings: str = "", taxa: str = TAXA, obs: str = OBS) -> Path:
    d = tmp_path / "ds"
    d.mkdir()
    (d / "observations.csv").write_text(obs, encoding="utf-8")
    (d / "sources.csv").write_text(SOURCES, encoding="utf-8")
    if taxa:
        (d / "taxa.csv").write_text(taxa, encoding="utf-8")
    if settings:
        (d / "comparo.toml").write_text(settings, encoding="utf-8")
    return d


def rows(folder: Path):
    return harmonise(load(folder)).rows.set_index("obs_id")


def test_endotherm_in_vivo_kept_ectotherm_normalised_numeric_reference(tmp_path):
    """With the default reference (25 °C): the pigeon's in-vivo frequency stays at 7 Hz
    (40 °C), its skinned-fiber rate goes 15 -> 25 °C; the locust's in-vivo frequency goes
    30 -> 25 °C. Expected values by the standard Q10 rule (common practice)."""
    r = rows(dataset(tmp_path))
    assert r.loc["b2", "value_h"] == 7.0 and r.loc["b2", "temperature_rule"] == "as measured"
    assert r.loc["b2", "value_temp_c"] == 40.0
    assert r.loc["b3", "value_h"] == pytest.approx(q10_rule(50, 15, 25, Q10_ATTACH), rel=1e-12)
    assert r.loc["l2", "value_h"] == pytest.approx(q10_rule(20, 30, 25, Q10_FREQ), rel=1e-12)
    # a bat frequency without a preparation counts as in vivo (a frequency is what the animal does)
    assert r.loc["m2", "value_h"] == 12.0 and "no preparation" in r.loc["m2", "temperature_note"]


def test_heterotherm_kept_at_its_operating_temperature_normalised_away_from_it(tmp_path):
    """A bumblebee (heterotherm, thorax 36 °C): flight at 36 °C is regulated and kept; a
    value at 28 °C (beyond the 2 K tolerance) is normalised like an ectotherm's; its per-row
    Q10 of 2.5 wins over the catalogue's. Standard Q10 rule (common practice)."""
    d = dataset(tmp_path)
    r = rows(d)
    assert r.loc["h2", "value_h"] == 150.0
    assert r.loc["h3", "value_h"] == pytest.approx(q10_rule(120, 28, 25, Q10_FREQ), rel=1e-12)
    assert r.loc["h4", "value_h"] == pytest.approx(q10_rule(80, 20, 25, 2.5), rel=1e-12)
    assert r.loc["h4", "q10_used"] == 2.5
    from comparo.pipeline import check

    p = check(d).problems
    note = p[p["rule"] == "temperature-heterotherm"]
    assert (
        list(note["value"]) == ["28"]
        and "away from its operating temperature 36" in note["message"].iat[0]
    )


def test_operating_reference_brings_each_taxon_to_its_own_temperature(tmp_path):
    """reference_temperature_c = "operating": a rate at 15 °C on a bird operating at 40 °C
    with Q10 2 is multiplied by 2^2.5 (standard Q10 rule, common practice); the locust's
    in-vivo value measured at its operating temperature stays as measured (factor 1); the bat
    without an operating temperature falls back to fallback_c, with a note in check."""
    d = dataset(
        tmp_path,
        'reference_temperature_c = "operating"\n[temperature]\nfallback_c = 30\n'
        "[q10]\nattach_rate = 2.0\n",
    )
    r = rows(d)
    assert r.loc["b3", "value_h"] / 50 == pytest.approx(2**2.5, rel=1e-12)
    assert r.loc["l2", "value_h"] == 20.0 and r.loc["l2", "temperature_factor"] == 1.0
    assert r.loc["l3", "value_h"] == pytest.approx(q10_rule(40, 15, 30, 2.0), rel=1e-12)
    assert r.loc["h3", "value_h"] == pytest.approx(q10_rule(120, 28, 36, Q10_FREQ), rel=1e-12)
    tab = per_taxon(load(d)).set_index("taxon")
    assert tab.loc["Columba livia", "temperature_c"] == 40.0
    assert tab.loc["Myotis lucifugus", "temperature_c"] == 30.0
    assert tab.loc["Columba livia", "attach_rate_temp_c"] == 40.0
    assert tab.loc["Myotis lucifugus", "frequency_observed_temp_c"] == 37.0  # kept as measured


def test_operating_fallback_is_noted(tmp_path):
    """A taxon without operating_temperature_c whose value is normalised gets a note naming
    the fallback temperature."""
    obs = OBS + "m4,Myotis lucifugus,attach_rate,30,1/s,s1,T5,reported,20,skinned_fiber,\n"
    d = dataset(tmp_path, 'reference_temperature_c = "operating"\n', obs=obs)
    from comparo.pipeline import check

    probs = check(d).problems
    note = probs[probs["rule"] == "temperature-fallback"]
    assert list(note["value"]) == ["Myotis lucifugus"]
    assert "25 °C" in note["message"].iat[0]
    r = rows(d)
    assert r.loc["m4", "value_h"] == pytest.approx(q10_rule(30, 20, 25, Q10_ATTACH), rel=1e-12)


def test_normalise_setting_and_without_taxa_table_as_before(tmp_path):
    """regulated_in_vivo = "normalise" normalises the endotherm's in-vivo value too; a
    dataset without taxa.csv is normalised as before (every taxon as an ectotherm).
    Standard Q10 rule (common practice)."""
    r = rows(dataset(tmp_path, '[temperature]\nregulated_in_vivo = "normalise"\n'))
    assert r.loc["b2", "value_h"] == pytest.approx(q10_rule(7, 40, 25, Q10_FREQ), rel=1e-12)
    (tmp_path / "bare").mkdir()
    r = harmonise(load(dataset(tmp_path / "bare", taxa=""))).rows.set_index("obs_id")
    assert r.loc["b2", "value_h"] == pytest.approx(q10_rule(7, 40, 25, Q10_FREQ), rel=1e-12)
    assert r.loc["h2", "value_h"] == pytest.approx(q10_rule(150, 36, 25, Q10_FREQ), rel=1e-12)


def test_rules_by_clade_and_quantity_last_match_wins(tmp_path):
    """[[temperature.rule]]: a general rule, then one for a clade and quantity; the per-row
    q10 still wins. Standard Q10 rule (common practice)."""
    settings = (
        "[[temperature.rule]]\nq10 = 3.0\n"
        '[[temperature.rule]]\nq10 = 1.5\nquantity = "frequency_observed"\n'
        'where = { clade = "Orthoptera" }\n'
    )
    r = rows(dataset(tmp_path, settings))
    assert r.loc["l2", "value_h"] == pytest.approx(q10_rule(20, 30, 25, 1.5), rel=1e-12)
    assert r.loc["l3", "value_h"] == pytest.approx(q10_rule(40, 15, 25, 3.0), rel=1e-12)
    assert r.loc["h4", "q10_used"] == 2.5


def test_check_names_every_bad_temperature_setting(tmp_path):
    """Every problem of the [temperature] table in one pass, each naming the entry."""
    settings = (
        'reference_temperature_c = "operatng"\n'
        '[temperature]\nfalback_c = 20\nregulated_in_vivo = "yes"\n'
        '[[temperature.rule]]\nq10 = -1\nquantity = "atach_rate"\nwhere = { klade = "Aves" }\n'
        '[[temperature.rule]]\nq10 = 2.0\nwhere = { clade = "Avs" }\n'
        "[[temperature.rule]]\nq10 = 2.0\n"
    )
    res = check(dataset(tmp_path, settings))
    assert not res.ok
    p = res.problems
    msgs = dict(zip(p["column"], p["message"], strict=False))
    assert "operating" in msgs["reference_temperature_c"]
    assert "falback_c" in msgs["temperature.falback_c"]
    assert "fallback_c" in p.loc[p["column"] == "temperature.falback_c", "hint"].iat[0]
    assert "as_measured" in msgs["temperature.regulated_in_vivo"]
    assert "greater than 0" in msgs["temperature.rule[1].q10"]
    assert "attach_rate" in p.loc[p["column"] == "temperature.rule[1].quantity", "hint"].iat[0]
    assert "klade" in msgs["temperature.rule[1].where.klade"]
    assert "Aves" in p.loc[p["column"] == "temperature.rule[2].where.clade", "hint"].iat[0]
    assert "never apply" in msgs["temperature.rule[3]"]


def test_taxa_columns_are_validated(tmp_path):
    """thermoregulation is one of three words; operating_temperature_c a number up to 60 °C."""
    taxa = TAXA.replace("endotherm,40", "warm,104")
    p = check(dataset(tmp_path, taxa=taxa)).problems
    bad = p[(p["file"] == "taxa.csv") & (p["severity"] == "error")]
    assert set(bad["column"]) == {"thermoregulation", "operating_temperature_c"}


def test_per_taxon_temp_columns_and_mixed_temperatures(tmp_path):
    """Q_temp_c: the reference where normalised, the measured temperature where kept; the bat's
    two kept frequencies (36 and 38 °C) combine as they are and refer to their mean, 37 °C,
    with a note in check."""
    d = dataset(tmp_path)
    tab = per_taxon(load(d)).set_index("taxon")
    assert tab.loc["Columba livia", "frequency_observed_temp_c"] == 40.0
    assert tab.loc["Locusta migratoria", "frequency_observed_temp_c"] == 25.0
    assert tab.loc["Myotis lucifugus", "frequency_observed_temp_c"] == 37.0
    assert tab.loc["Myotis lucifugus", "frequency_observed"] == pytest.approx((12 + 11) / 2)
    assert "body_mass_temp_c" not in tab
    from comparo.pipeline import check

    p = check(d).problems
    mixed = " ".join(p.loc[p["rule"] == "temperature-mixed", "message"])
    assert "Myotis lucifugus" in mixed and "36 to 38 °C" in mixed
    off = per_taxon(load(d), temperature=False).set_index("taxon")
    assert off.loc["Locusta migratoria", "frequency_observed_temp_c"] == 30.0


def _fit_ols(d, *extra):
    """comparo fit D --x body_mass --y frequency_observed --method ols, plus *extra*."""
    return run_main(
        "fit", str(d), "--x", "body_mass", "--y", "frequency_observed", "--method", "ols", *extra
    )


def test_fit_says_what_was_rescaled(tmp_path):
    """fit JSON and text: how many values were rescaled, to what, the factor range (the
    factors by the standard Q10 rule, common practice) and the option that turns it off."""
    d = dataset(tmp_path)
    out = _fit_ols(d, "--format", "json")
    assert out.returncode == 0, out.stderr
    t = json.loads(out.stdout)["temperature"]
    factors = [2.0 ** ((25 - 30) / 10), 2.0 ** ((25 - 28) / 10)]  # locust l2, bumblebee h3
    assert (
        t["to"] == "25 °C"
        and t["values"] == 6
        and t["rescaled"] == 2
        and t["kept_as_measured"] == 4
    )
    assert t["factor_min"] == pytest.approx(min(factors)) and t["factor_max"] == pytest.approx(
        max(factors)
    )
    assert t["option"] == "--no-temperature"
    text = _fit_ols(d).stdout
    assert (
        "2 of 6 temperature-sensitive value(s) rescaled to 25 °C" in text
        and "--no-temperature" in text
    )
    off = _fit_ols(d, "--no-temperature", "--format", "json")
    assert json.loads(off.stdout)["temperature"]["to"] == "off"
    assert math.isclose(json.loads(off.stdout)["temperature"]["rescaled"], 0)


def test_axis_labels_and_report_say_the_temperature(tmp_path):
    """Figure axes of a temperature-sensitive quantity say the temperature its values refer
    to; the report's temperature table names the values kept as measured."""
    from comparo import fit
    from comparo.report.figures import axis_label

    d = dataset(tmp_path)
    ds = load(d)
    res = fit(per_taxon(ds), "body_mass", "frequency_observed", "ols")
    assert axis_label("frequency_observed", ds.catalog, res.temperature).endswith(
        "at 25 °C\n(endotherms in vivo: at body temperature)"
    )
    assert "°C" not in axis_label("body_mass", ds.catalog, res.temperature)
    (d / "comparo.toml").write_text('reference_temperature_c = "operating"\n', encoding="utf-8")
    ds = load(d)
    res = fit(per_taxon(ds), "body_mass", "attach_rate", "ols")
    assert axis_label("attach_rate", ds.catalog, res.temperature).endswith(
        "at operating temperature"
    )
    off = fit(per_taxon(ds, temperature=False), "body_mass", "attach_rate", "ols")
    assert axis_label("attach_rate", ds.catalog, off.temperature).endswith(
        "at measured temperature"
    )
    from comparo.curation.harmonise import harmonise as h
    from comparo.curation.provenance import temperature_rules

    (tmp_path / "again").mkdir()
    rules = temperature_rules(h(load(dataset(tmp_path / "again", taxa=TAXA))))
    kept = rules[rules["rule"] == "as measured"]
    assert dict(zip(kept["quantity_key"], kept["rows"], strict=True)) == {"frequency_observed": 4}


def test_the_tree_figure_says_the_temperature_as_the_scaling_axis_does():
    """The report's tree figure (tips coloured by y) labels a temperature-sensitive y with
    the temperature its values refer to, the same words as the scaling plot's axis; a
    quantity that is not temperature-sensitive keeps its plain label."""
    from support import DEMO

    from comparo import fit
    from comparo.report import per_fit as pieces
    from comparo.report.figures import axis_label

    ds = load(DEMO)
    table = per_taxon(ds)
    res = fit(table, "body_mass", "frequency_observed", "pgls", tree=ds.tree)
    pts = pieces.fit_points(res, table, "body_mass", "frequency_observed", None)
    fig, text = pieces.tree_figure(
        ds,
        pts,
        {"y": "frequency_observed", "method": "pgls"},
        None,
        "fit",
        [],
        res.log,
        res.temperature,
    )
    bars = [ax.get_ylabel() or ax.get_xlabel() for ax in fig.axes]
    expected = axis_label("frequency_observed", ds.catalog, res.temperature)
    assert "at 25 °C" in expected
    assert any(b.startswith(expected) for b in bars), bars
    assert "at 25 °C" in text and "\n" not in text
