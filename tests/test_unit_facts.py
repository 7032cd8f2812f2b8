"""The unit facts shipped with comparo (comparo/base/unit_facts.json) against pint itself.

Reference library: pint's full default registry, parsed afresh from pint's own default
definitions file (``default_en.txt``, no disk cache) in this process. The shipped table
must give the answers that registry gives; when pint or the covered units change, these
tests fail until ``python tools/build_unit_facts.py`` is run again.
"""

from __future__ import annotations

import importlib.util
import json
import math
import subprocess
import sys
from pathlib import Path

import pint
import pytest
from support import DEMO

from comparo.base import units

_BUILD = Path(__file__).resolve().parents[1] / "tools" / "build_unit_facts.py"
_spec = importlib.util.spec_from_file_location("build_unit_facts", _BUILD)
unitfacts = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(unitfacts)


@pytest.fixture(scope="module")
def fresh():
    """pint's full default registry, built without a cache, as comparo configures it."""
    ureg = pint.UnitRegistry(autoconvert_offset_to_baseunit=True, cache_folder=None)
    for line in units.EXTRA_DEFINITIONS:
        ureg.define(line)
    return ureg


@pytest.fixture(scope="module")
def shipped() -> dict:
    return json.loads(units.FACTS_FILE.read_text(encoding="utf-8"))


def _pint_quantity(ureg, key: str):
    """What pint reads for a key of the table ("1" and "%" are comparo's two spellings
    that are not handed to pint's parser, see comparo.base.units.parse_with)."""
    if key == "1":
        return ureg.Quantity(1.0, "dimensionless")
    if key == "%":
        return ureg.Quantity(1.0, "percent")
    q = ureg.parse_expression(key)
    return q if isinstance(q, ureg.Quantity) else ureg.Quantity(float(q), "dimensionless")


#: True when the installed pint is the version that wrote the shipped table. With any
#: other version comparo ignores the table and asks pint (the tests below say which).
SAME_PINT = json.loads(units.FACTS_FILE.read_text(encoding="utf-8"))["pint"] == pint.__version__


def test_the_table_is_used_only_with_the_pint_that_wrote_it(shipped):
    """Used when the installed pint computed it; ignored (every call asks pint) otherwise."""
    if SAME_PINT:
        assert units._table() is not None
    else:
        assert units._table() is None, (
            f"table of pint {shipped['pint']} used with pint {pint.__version__}"
        )


def test_shipped_table_equals_a_fresh_regeneration(shipped, fresh):
    """The whole table computed again in memory, with the fresh registry, is the shipped one
    (same units covered, same numbers to the last bit, same texts). With another pint
    version, the units covered must still be the same."""
    again = json.loads(unitfacts.dumps(unitfacts.build(fresh)))
    assert sorted(again["units"]) == sorted(shipped["units"]), (
        "run python tools/build_unit_facts.py"
    )
    if SAME_PINT:
        assert again == shipped, (
            "the shipped unit facts are stale: run python tools/build_unit_facts.py"
        )


def test_every_entry_against_pint(shipped, fresh):
    """Each entry, recomputed straight from pint: factor to SI base units (rel 1e-12),
    dimensionality, offset (the base-unit value of 0 in the unit) and the short rendering."""
    assert len(shipped["units"]) > 50
    for key, f in shipped["units"].items():
        q = _pint_quantity(fresh, key)
        assert math.isclose(f["factor"], q.to_base_units().magnitude, rel_tol=1e-12), key
        assert f["dimensions"] == dict(q.dimensionality), key
        zero = fresh.Quantity(0.0, q.units).to_base_units().magnitude
        assert (f["offset"] or 0.0) == pytest.approx(zero, rel=1e-12, abs=0.0), key
        shown = "1" if q.dimensionless and q.magnitude == 1 else f"{q.units:~P}"
        assert f["pretty"] == shown, key
    for kind, expr in units.KIND_DIMENSIONS.items():
        dims = (
            fresh.Quantity(1.0, "dimensionless").dimensionality
            if not expr
            else fresh.get_dimensionality(expr)
        )
        assert shipped["kinds"][kind] == dict(dims), kind


def test_offset_unit_is_celsius(shipped):
    """degree Celsius: 0 °C = 273.15 K (SI Brochure, BIPM 2019, section 2.3.1)."""
    assert shipped["units"]["degC"]["offset"] == pytest.approx(273.15, rel=1e-15)
    assert shipped["units"]["K"]["offset"] is None


def test_table_conversions_equal_pints_for_every_pair(shipped, fresh):
    """conversion_factor between any two units of the table that measure the same thing
    (answered from the table) equals pint's (a / b).to('dimensionless') within 1e-12;
    units of different dimensions still raise (comparo's UnitMismatchError, where pint raises its
    DimensionalityError)."""
    keys = list(shipped["units"])
    table = shipped["units"]
    pairs = 0
    for a in keys:
        qa = _pint_quantity(fresh, a)
        for b in keys:
            qb = _pint_quantity(fresh, b)
            if qa.dimensionality != qb.dimensionality:
                continue
            assert a in table and b in table
            want = (qa / qb).to("dimensionless").magnitude
            assert math.isclose(units.conversion_factor(a, b), want, rel_tol=1e-12), (a, b)
            assert units.same_dimension(a, b)
            pairs += 1
    assert pairs > 300
    with pytest.raises(units.UnitMismatchError):
        units.conversion_factor("kPa", "um")
    assert not units.same_dimension("kPa", "um")


@pytest.mark.parametrize(
    "text",
    [*units.USUAL_UNITS["length"], "μm", "micron", "mPa s", "Pa·s", "s⁻¹", "µm²", "None", "Count"],
)
def test_typed_spellings_are_read_from_the_table(text, shipped):
    """Spellings as typed (Greek mu, middle dot, superscripts, words for 1) find their entry."""
    assert units.facts_key(text) in shipped["units"]


@pytest.mark.parametrize(
    "unit,canonical,expected",
    [
        (
            "dyn/cm**2",
            "Pa",
            0.1,
        ),  # NIST SP 811 (2008) B.8: dyne per square centimeter = 1.0 E-01 Pa
        (
            "lbf/in^2",
            "kPa",
            6.894757,
        ),  # NIST SP 811 B.8: pound-force per square inch = 6.894 757 E+03 Pa
        # NIST SP 811 B.8: furlong = 2.011 684 E+02 m (survey foot basis); pint defines the
        # international furlong (660 ft = 201.168 m), so compare within 1e-5; fortnight = 14 d
        ("furlong/fortnight", "m/s", 201.168 / (14 * 86400)),
    ],
)
def test_units_outside_the_table_still_convert_through_pint(unit, canonical, expected, fresh):
    """A unit the table does not cover is read by pint, with pint's answer."""
    assert (
        units.facts_key(unit)
        not in json.loads(units.FACTS_FILE.read_text(encoding="utf-8"))["units"]
    )
    got = units.conversion_factor(unit, canonical)
    assert math.isclose(
        got,
        (fresh.parse_expression(unit) / fresh.parse_expression(canonical))
        .to("dimensionless")
        .magnitude,
        rel_tol=1e-12,
    )
    assert got == pytest.approx(expected, rel=1e-5)
    assert units.base_factor(unit) == pytest.approx(
        fresh.parse_expression(unit).to_base_units().magnitude, rel=1e-12
    )


def test_facts_outside_the_table_come_from_pint(fresh):
    assert units.measures("dyn/cm**2", "stress")
    assert units.pretty("dyn/cm**2") == f"{fresh.parse_expression('dyn/cm**2').units:~P}"
    assert not units.measures("furlong/fortnight", "frequency")


@pytest.mark.parametrize("bad", ["kPa)", "furlongs per fortnight squared", "-1 m", "x" * 100, ""])
def test_unreadable_units_keep_pints_message(bad):
    """check_unit raises what parse_unit raises, word for word."""
    with pytest.raises(units.UnitParseError) as expected:
        units.parse_unit(bad)
    with pytest.raises(units.UnitParseError) as got:
        units.check_unit(bad)
    assert str(got.value) == str(expected.value)


_EVERYDAY = """
import sys
from comparo.cli.main import main
ds, out = sys.argv[1], sys.argv[2]
fit = ["fit", ds, "--x", "body_mass", "--y", "frequency_observed", "--method", "sma"]
codes = [main(["check", ds]), main(["table", ds, "-o", out]), main(fit + ["--format", "json"])]
print("RESULT", codes, "pint" in sys.modules)
"""


def test_everyday_commands_on_the_demo_do_not_import_pint(tmp_path):
    """check, table and an SMA fit on the demo compilation answer every unit question from
    the table: pint is never imported (it costs about 0.2 s per process)."""
    import shutil

    ds = tmp_path / "demo"
    shutil.copytree(DEMO, ds)
    proc = subprocess.run(
        [sys.executable, "-c", _EVERYDAY, str(ds), str(tmp_path / "t.csv")],
        capture_output=True,
        text=True,
        timeout=120,
    )
    last = proc.stdout.strip().splitlines()[-1]
    # with another pint version the table is ignored and pint answers (same exit codes)
    assert last == f"RESULT [0, 0, 0] {not SAME_PINT}", proc.stderr[-2000:]
    assert (tmp_path / "t.csv").stat().st_size > 0
