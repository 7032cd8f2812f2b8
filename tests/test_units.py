"""comparo.base.units: parsing units as typed, and conversion."""

import json

import pint
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from comparo.base import units


@pytest.mark.parametrize("text", ["µm", "μm", "um", "micron", "microns", "micrometer"])
def test_micrometre_spellings(text):
    assert units.conversion_factor(text, "um") == pytest.approx(1.0)


@pytest.mark.parametrize("text", ["1/s", "s^-1", "s**-1", "s⁻¹", "Hz"])
def test_reciprocal_second_spellings(text):
    assert units.conversion_factor(text, "1/s") == pytest.approx(1.0)


@pytest.mark.parametrize("text", ["mPa s", "mPa*s", "mPa·s", "cP"])
def test_viscosity_spellings(text):
    assert units.conversion_factor(text, "mPa*s") == pytest.approx(1.0)


def test_area_superscript():
    assert units.conversion_factor("µm²", "nm**2") == pytest.approx(1e6)


@pytest.mark.parametrize(
    "bad", ["", "   ", "furlongs per fortnight squared", "kPa)", "x" * 100, "-1 m"]
)
def test_unparseable_units_raise_clear_error(bad):
    with pytest.raises(units.UnitParseError):
        units.parse_unit(bad)


def test_dimension_mismatch_raises():
    """pint says the two units differ (its DimensionalityError); comparo says so in words,
    naming both units, never the library's exception class."""
    with pytest.raises(pint.DimensionalityError):
        (units.registry().Quantity(1, "kPa")).to("um")
    with pytest.raises(units.UnitMismatchError, match="'kPa'.*'um'") as info:
        units.conversion_factor("kPa", "um")
    assert "Error" not in str(info.value)


@settings(max_examples=60, deadline=None)
@given(
    st.sampled_from(["nm", "um", "mm", "cm", "m"]),
    st.sampled_from(["nm", "um", "mm", "cm", "m"]),
    st.floats(min_value=1e-6, max_value=1e6),
)
def test_round_trip(a, b, x):
    """Converting a -> b -> a returns the value (to float precision)."""
    there = x * units.conversion_factor(a, b)
    back = there * units.conversion_factor(b, a)
    assert back == pytest.approx(x, rel=1e-12)


# --- the cached registry against pint's full default registry built fresh (independent route:
# pint's own definitions file parsed anew, no cache) ---------------------------------------------


def _catalogue_units() -> list[str]:
    from comparo.base.catalog import load_catalog

    return sorted({q.unit for q in load_catalog().values()})


# what the synthetic demo and biologists type (tests above and the demo's unit column)
TYPED = [
    "um",
    "µm",
    "micron",
    "nm",
    "mm",
    "m",
    "mg",
    "g",
    "kg",
    "Hz",
    "1/s",
    "s^-1",
    "ms",
    "s",
    "Pa",
    "kPa",
    "MPa",
    "mPa*s",
    "cP",
    "nm**2",
    "µm²",
    "degC",
    "K",
    "kJ/mol",
    "percent",
]


@pytest.fixture(scope="module")
def fresh_pint():
    return pint.UnitRegistry(autoconvert_offset_to_baseunit=True)


@pytest.mark.parametrize("unit", _catalogue_units() + TYPED)
def test_conversions_match_a_fresh_full_pint_registry(unit, fresh_pint):
    """Every catalogue unit and the common spellings: the same dimensionality and the same
    factor to SI base units as pint's full default registry built without a cache."""
    ours = units.parse_unit(unit)
    text = units._normalise(unit)
    theirs = (
        fresh_pint.Quantity(1.0, "dimensionless")
        if text in ("dimensionless",)
        else fresh_pint.parse_expression(text)
    )
    assert dict(ours.dimensionality) == dict(theirs.dimensionality)
    if "degC" not in unit:
        assert ours.to_base_units().magnitude == pytest.approx(
            theirs.to_base_units().magnitude, rel=1e-14
        )


def test_catalogue_conversions_between_every_same_kind_pair(fresh_pint):
    """conversion_factor between catalogue units of one dimension equals the fresh registry's."""
    cat = _catalogue_units() + ["um", "mm", "nm", "mg", "Hz", "MPa", "Pa"]
    for a in cat:
        for b in cat:
            qa, qb = (
                fresh_pint.parse_expression(units._normalise(a)),
                fresh_pint.parse_expression(units._normalise(b)),
            )
            if qa.dimensionality != qb.dimensionality:
                continue
            assert units.conversion_factor(a, b) == pytest.approx(
                (qa / qb).to("dimensionless").magnitude, rel=1e-14
            )


def test_registry_cache_is_written_once_and_read_back(tmp_path, fresh_pint):
    """First build writes pint's cache and the completion marker; a second build reads it and
    converts as the fresh registry does; no private build folder is left behind."""
    folder = tmp_path / "pint-cache"
    first = units._cached_registry(folder)
    assert (folder / "complete").is_file()
    assert list(folder.glob("*.pickle"))
    assert not list(folder.glob(".build-*"))
    second = units._cached_registry(folder)
    for reg in (first, second):
        for u in ["um", "mPa*s", "MPa", "1/s", "mg"]:
            q = reg.parse_expression(u)
            assert q.to_base_units().magnitude == pytest.approx(
                fresh_pint.parse_expression(u).to_base_units().magnitude, rel=1e-15
            )


def test_damaged_cache_falls_back_to_a_full_registry(tmp_path, monkeypatch):
    """A truncated cache file never breaks a conversion: registry() builds without the cache
    and drops the marker so the next process rebuilds it."""
    folder = tmp_path / f"pint-{pint.__version__}"
    units._cached_registry(folder)
    for f in folder.glob("*.pickle"):
        f.write_bytes(f.read_bytes()[:10])
    monkeypatch.setenv("COMPARO_CACHE_DIR", str(tmp_path))

    def clear():  # quantities of one registry cannot meet those of another
        for fn in (units.registry, units.parse_unit, units.conversion_factor, units.facts):
            fn.cache_clear()

    clear()
    try:  # a unit outside the unit facts, so pint's registry is built
        assert (
            units.facts_key("dyn/cm**2")
            not in json.loads(units.FACTS_FILE.read_text(encoding="utf-8"))["units"]
        )
        # NIST SP 811 (2008) B.8: dyne per square centimeter = 1.0 E-01 Pa
        assert units.conversion_factor("dyn/cm**2", "Pa") == pytest.approx(0.1)
        assert not (folder / "complete").exists()
    finally:
        monkeypatch.delenv("COMPARO_CACHE_DIR")
        clear()


def test_cache_can_be_turned_off(monkeypatch):
    monkeypatch.setenv("COMPARO_CACHE_DIR", "")
    assert units.cache_folder() is None
