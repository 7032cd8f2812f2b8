"""Unit conversion factors against NIST Special Publication 811 (2008 edition,
Guide for the Use of the International System of Units, Appendix B.8/B.9)."""

import math

import pytest

from comparo.base import units

# (from, to, factor): value in `from` times factor = value in `to`
NIST_SP811 = [
    ("mm", "um", 1000.0),  # SI prefixes (NIST SP 811 §4.3)
    ("dyn/cm^2", "Pa", 0.1),  # B.8: dyne per square centimeter = 1.0 E-01 Pa
    ("lbf/in^2", "Pa", 6894.757),  # B.8: pound-force per square inch = 6.894 757 E+03 Pa
    ("P", "Pa*s", 0.1),  # B.8: poise = 1.0 E-01 Pa s
    ("cP", "mPa*s", 1.0),  # centipoise = 1 mPa s (B.8, poise with SI prefix)
    ("lb", "kg", 0.45359237),  # B.8: pound (avoirdupois) = 4.535 924 E-01 kg (exact)
    ("in", "m", 0.0254),  # B.8: inch = 2.54 E-02 m (exact)
    ("angstrom", "nm", 0.1),  # B.8: ångström = 1.0 E-10 m
    ("micron", "m", 1e-6),  # B.8: micron = 1.0 E-06 m
    ("bar", "kPa", 100.0),  # B.8: bar = 1.0 E+05 Pa
    ("mmHg", "Pa", 133.3224),  # B.8: millimeter of mercury, conventional = 1.333 224 E+02 Pa
    ("darcy", "m**2", 9.869233e-13),  # B.8: darcy = 9.869 233 E-13 m^2
]


@pytest.mark.parametrize("src,dst,factor", NIST_SP811)
def test_conversion_factors_match_nist_sp811(src, dst, factor):
    """NIST SP 811 Appendix B conversion factors (to the digits printed there)."""
    got = units.conversion_factor(src, dst)
    digits = len(f"{factor:.7g}".replace(".", "").replace("e-", "").lstrip("0")) or 1
    assert math.isclose(got, factor, rel_tol=max(5e-7, 10 ** (-min(digits, 7)))), (src, dst, got)


def test_hertz_is_reciprocal_second():
    """SI Brochure (BIPM 2019, Table 4): 1 Hz = 1 s^-1."""
    assert units.conversion_factor("Hz", "1/s") == pytest.approx(1.0)
    assert units.conversion_factor("s^-1", "Hz") == pytest.approx(1.0)
