"""comparo.units: parsing units as typed, and conversion."""

import pint
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from comparo import units


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


@pytest.mark.parametrize("bad", ["", "   ", "furlongs per fortnight squared", "kPa)", "x" * 100, "-1 m"])
def test_unparseable_units_raise_clear_error(bad):
    with pytest.raises(units.UnitParseError):
        units.parse_unit(bad)


def test_dimension_mismatch_raises():
    with pytest.raises(pint.DimensionalityError):
        units.conversion_factor("kPa", "um")


@settings(max_examples=60, deadline=None)
@given(st.sampled_from(["nm", "um", "mm", "cm", "m"]), st.sampled_from(["nm", "um", "mm", "cm", "m"]),
       st.floats(min_value=1e-6, max_value=1e6))
def test_round_trip(a, b, x):
    """Converting a -> b -> a returns the value (to float precision)."""
    there = x * units.conversion_factor(a, b)
    back = there * units.conversion_factor(b, a)
    assert back == pytest.approx(x, rel=1e-12)
