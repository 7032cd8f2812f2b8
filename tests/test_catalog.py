"""comparo.base.catalog: the shipped quantity catalogue and users' own quantities."""

import pytest

from comparo.base import units
from comparo.base.catalog import load_catalog, read_schema
from comparo.base.errors import InputError

DESIGN_KEYS = [
    "body_mass",
    "muscle_mass",
    "fiber_radius",
    "fiber_length",
    "sarcomere_length",
    "lattice_spacing_d10",
    "myofibril_volume_fraction",
    "elastic_modulus",
    "transverse_modulus",
    "permeability",
    "fluid_viscosity",
    "attach_rate",
    "detach_rate",
    "kinetic_time",
    "frequency_observed",
]


def test_every_initial_key_is_catalogued_with_its_fields():
    cat = load_catalog()
    for key in DESIGN_KEYS:
        q = cat[key]
        assert q.label and q.description and q.range_source
        assert q.range and q.range[0] < q.range[1]
        assert units.parse_unit(q.unit).dimensionality == units.dimensionality(q.kind)


def test_temperature_sensitive_quantities():
    cat = load_catalog()
    sensitive = {k for k, q in cat.items() if q.temperature_sensitive}
    assert sensitive == {"attach_rate", "detach_rate", "kinetic_time", "frequency_observed"}
    assert all(cat[k].q10 for k in sensitive)


def test_diameter_is_stored_as_radius():
    cat = load_catalog()
    assert cat.target("fiber_diameter").key == "fiber_radius"
    assert cat["fiber_diameter"].factor == 0.5


def test_user_quantity_added_from_settings():
    cat = load_catalog(
        {
            "twitch_time": {
                "unit": "ms",
                "kind": "time",
                "range": [0.1, 1000],
                "temperature_sensitive": True,
            }
        }
    )
    assert cat["twitch_time"].unit == "ms" and cat["twitch_time"].temperature_sensitive
    assert cat["twitch_time"].origin == "comparo.toml"


def test_user_quantity_kind_read_off_unit():
    assert load_catalog({"wing_area": {"unit": "mm**2"}})["wing_area"].kind == "area"


def test_bad_user_quantities_are_all_reported():
    with pytest.raises(InputError) as exc:
        load_catalog(
            {
                "a": {"unit": "blorp"},
                "b": {"unit": "ms", "kind": "length"},
                "c": {"unit": "ms", "range": [5, 1]},
                "d": {"unit": "s", "colour": "red"},
            }
        )
    rules = set(exc.value.problems["rule"])
    assert {"quantity-unit", "quantity-unit-kind", "quantity-range", "quantity-field"} <= rules


def test_tables_schema_declares_design_columns():
    spec = read_schema("tables.toml")
    obs = spec["observations"]["columns"]
    required = {k for k, c in obs.items() if c.get("required")}
    assert required == {
        "obs_id",
        "taxon",
        "quantity",
        "value",
        "unit",
        "source_id",
        "locator",
        "basis",
    }
    assert obs["basis"]["values"] == ["reported", "computed", "digitized", "proxy", "assumed"]
    assert obs["uncertainty_kind"]["values"] == ["sd", "se", "ci95", "range_half"]
