"""Property tests across modules: row accounting of the audit, unit round trips
against pint itself, invariances of the scaling fits under axis swap and unit
change, and bad cells of more kinds found at their row and column.

Every expected value follows from a definition (the accounting identity, the
pint factor, the algebra of a straight line on log axes), not from a previous
run of comparo."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pint
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from support import OBS_HEADER, SOURCES, VALID_ROWS, write_dataset

import comparo
from comparo.base import units
from comparo.base.catalog import load_catalog
from comparo.fitting import fit
from comparo.validation.tables import check

FIXTURE_OK = [HealthCheck.function_scoped_fixture]

# ------------------------------------------------------------------ row accounting
# Cells drawn per row: some valid, some errors (not a number, non-positive, unit of
# the wrong dimension, unknown unit, unknown source, unknown quantity, bad basis).
QUANTITY_UNITS = st.sampled_from(
    [
        ("fiber_radius", "um"),
        ("fiber_radius", "mm"),
        ("body_mass", "mg"),
        ("body_mass", "g"),
        ("lattice_spacing_d10", "nm"),
        ("fiber_radius", "kPa"),
        ("body_mass", "blorp"),
        ("wing_colour", "um"),
    ]
)
VALUES = st.sampled_from(["10", "12", "12.5", "0.02", "1e3", "0", "-1", "abc", ""])
ROW = st.tuples(
    st.sampled_from(["Apis mellifera", "Bombus terrestris", "Apis mellifica"]),
    QUANTITY_UNITS,
    VALUES,
    st.sampled_from(["", "1", "-2"]),
    st.sampled_from(["s1", "s2", "s9"]),
    st.sampled_from(["T1", "t1", "T2"]),
    st.sampled_from(["reported", "digitized", "guessed"]),
)
ERROR_VALUES = {"0", "-1", "abc", ""}


def _accounting_lines(rows, copies):
    lines = []
    for i, (taxon, (q, u), v, unc, s, loc, b) in enumerate(rows):
        kind = "sd" if unc else ""
        line = f"{taxon},{q},{v},{u},{unc},{kind},,{s},{loc},{b},,,"
        lines.append(f"o{i}," + line)
        for k in range(copies[i] if i < len(copies) else 0):  # exact duplicates under new ids
            lines.append(f"o{i}d{k}," + line)
    return lines


@settings(max_examples=30, deadline=None, suppress_health_check=FIXTURE_OK)
@given(rows=st.lists(ROW, min_size=1, max_size=12), copies=st.lists(st.integers(0, 2), max_size=12))
def test_property_rows_read_equal_used_plus_merged_plus_excluded(tmp_path_factory, rows, copies):
    """rows_read = rows_used + rows_merged + len(rows_excluded) (the audit's accounting identity),
    with duplicate rows and error rows mixed in; every row with an error is among the excluded,
    and no row is both merged and excluded."""
    lines = _accounting_lines(rows, copies)
    folder = write_dataset(tmp_path_factory.mktemp("acct"), lines, sources=SOURCES)
    ds = comparo.load(folder, strict=False)
    rep = comparo.audit(ds)
    assert rep.rows_read == len(lines)
    assert rep.rows_used + rep.rows_merged + len(rep.rows_excluded) == rep.rows_read
    assert rep.rows_used >= 0 and rep.rows_merged == len(rep.merged)
    ids = {ln.split(",", 1)[0] for ln in lines}
    excluded = [r["obs_id"] for r in rep.rows_excluded]
    merged = [m["obs_id"] for m in rep.merged]
    assert len(set(excluded)) == len(excluded) and len(set(merged)) == len(merged)
    assert set(excluded) <= ids and set(merged) <= ids
    assert not set(excluded) & set(merged)
    # rows that break a rule by definition (value not a positive number, wrong-dimension or
    # unknown unit, unknown source, unknown quantity, basis outside the enum) are excluded
    for ln in lines:
        cells = ln.split(",")
        oid, q, v, u, unc, s, b = (
            cells[0],
            cells[2],
            cells[3],
            cells[4],
            cells[5],
            cells[8],
            cells[10],
        )
        bad = (
            v in ERROR_VALUES
            or u in ("kPa", "blorp")
            or s == "s9"
            or q == "wing_colour"
            or b == "guessed"
            or unc == "-2"
        )
        if bad:
            assert oid in excluded, (oid, rep.rows_excluded)


# ------------------------------------------------------------------ unit round trips
# (unit as a user types it, the same unit spelled out for an independent pint registry)
TYPED_UNITS = {
    "mass": [
        ("mg", "milligram"),
        ("g", "gram"),
        ("kg", "kilogram"),
        ("µg", "microgram"),
        ("ug", "microgram"),
    ],
    "length": [
        ("um", "micrometer"),
        ("µm", "micrometer"),
        ("\u03bcm", "micrometer"),
        ("micron", "micrometer"),
        ("nm", "nanometer"),
        ("mm", "millimeter"),
        ("cm", "centimeter"),
        ("m", "meter"),
    ],
    "stress": [
        ("Pa", "pascal"),
        ("kPa", "kilopascal"),
        ("MPa", "megapascal"),
        ("N/m²", "newton / meter ** 2"),
        ("N/m^2", "newton / meter ** 2"),
    ],
    "area": [
        ("nm²", "nanometer ** 2"),
        ("um^2", "micrometer ** 2"),
        ("µm**2", "micrometer ** 2"),
        ("m**2", "meter ** 2"),
    ],
    "viscosity": [
        ("mPa s", "millipascal * second"),
        ("Pa·s", "pascal * second"),
        ("mPa*s", "millipascal * second"),
        ("cP", "centipoise"),
    ],
    "rate": [
        ("1/s", "1 / second"),
        ("s^-1", "1 / second"),
        ("s⁻¹", "1 / second"),
        ("1/ms", "1 / millisecond"),
        ("Hz", "hertz"),
        ("kHz", "kilohertz"),
    ],
    "time": [("ms", "millisecond"), ("s", "second"), ("µs", "microsecond"), ("min", "minute")],
    "fraction": [("%", "percent"), ("1", "dimensionless"), ("fraction", "dimensionless")],
}
TYPED_UNITS["frequency"] = TYPED_UNITS["rate"]
TYPED_UNITS["ratio"] = TYPED_UNITS["fraction"]
TYPED_UNITS["energy"] = [
    ("J", "joule"),
    ("mJ", "millijoule"),
    ("uJ", "microjoule"),
    ("µJ", "microjoule"),
    ("N*m", "newton * meter"),
]
TYPED_UNITS["power"] = [
    ("W", "watt"),
    ("mW", "milliwatt"),
    ("µW", "microwatt"),
    ("J/s", "joule / second"),
]
TYPED_UNITS["power_per_mass"] = [
    ("W/kg", "watt / kilogram"),
    ("mW/g", "milliwatt / gram"),
    ("W/g", "watt / gram"),
]
# canonical units of the catalogue, spelled out for the independent registry
CANONICAL_SPELLED = {
    "kg": "kilogram",
    "um": "micrometer",
    "mm": "millimeter",
    "nm": "nanometer",
    "kPa": "kilopascal",
    "nm**2": "nanometer ** 2",
    "mPa*s": "millipascal * second",
    "1/s": "1 / second",
    "s": "second",
    "Hz": "hertz",
    "dimensionless": "dimensionless",
    "1": "dimensionless",
    "J/m**3": "joule / meter ** 3",
    "J": "joule",
    "W": "watt",
    "W/kg": "watt / kilogram",
}
CATALOG = load_catalog()
QUANTITY_KEYS = sorted(CATALOG)
REF = pint.UnitRegistry()  # a registry of its own: nothing comparo defines


@settings(max_examples=40, deadline=None)
@given(
    key=st.sampled_from(QUANTITY_KEYS), data=st.data(), value=st.floats(1e-6, 1e6, allow_nan=False)
)
def test_property_unit_round_trip_matches_pint(key, data, value):
    """value in unit -> canonical -> back is the value (1e-12 relative); the factor equals the one
    pint's stock registry gives for the spelled-out units."""
    q = CATALOG[key]
    typed, spelled = data.draw(st.sampled_from(TYPED_UNITS[q.kind]))
    ref = REF.Quantity(1.0, spelled).to(CANONICAL_SPELLED[q.unit]).magnitude
    forward = units.conversion_factor(typed, q.unit)
    back = units.conversion_factor(q.unit, typed)
    assert forward == pytest.approx(ref, rel=1e-12)
    assert back == pytest.approx(1.0 / ref, rel=1e-12)
    assert value * forward * back == pytest.approx(value, rel=1e-12)
    assert units.same_dimension(typed, q.unit)


# ------------------------------------------------------------------ fit invariances
def _table(x, y):
    return pd.DataFrame({"taxon": [f"t{i}" for i in range(len(x))], "x": x, "y": y})


@st.composite
def scaling_data(draw):
    """Positive (x, y) near a power law y = 10^a x^b with scatter; x not all equal."""
    n = draw(st.integers(5, 40))
    logx = np.array(draw(st.lists(st.floats(-3, 3, allow_nan=False), min_size=n, max_size=n)))
    noise = np.array(draw(st.lists(st.floats(-0.3, 0.3, allow_nan=False), min_size=n, max_size=n)))
    a = draw(st.floats(-2, 2))
    b = draw(st.floats(0.2, 2.0)) * draw(st.sampled_from([1, -1]))
    assume(np.ptp(logx) > 0.5)
    logy = a + b * logx + noise
    r = np.corrcoef(logx, logy)[0, 1]
    assume(abs(r) > 0.2)  # a slope whose sign is not decided by rounding
    return 10.0**logx, 10.0**logy


@settings(max_examples=30, deadline=None)
@given(xy=scaling_data())
def test_property_sma_swap_inverts_slope(xy):
    """SMA slope of x on y is 1/(slope of y on x): sign(s_xy) sqrt(s_xx/s_yy) (Warton et al.
    2006)."""
    x, y = xy
    t = _table(x, y)
    b_xy = fit(t, "x", "y", method="sma").slope
    b_yx = fit(t, "y", "x", method="sma").slope
    assert b_yx == pytest.approx(1.0 / b_xy, rel=1e-9, abs=1e-9)


@settings(max_examples=30, deadline=None)
@given(
    xy=scaling_data(),
    method=st.sampled_from(["ols", "sma"]),
    logc=st.floats(-6, 6, allow_nan=False),
)
def test_property_unit_change_shifts_intercept_only(xy, method, logc):
    """log10(c x) = log10 x + log10 c: slope unchanged, intercept - slope log10 c;
    log10(c y) = log10 y + log10 c: slope unchanged, intercept + log10 c."""
    x, y = xy
    c = 10.0**logc
    base = fit(_table(x, y), "x", "y", method=method)
    xs = fit(_table(x * c, y), "x", "y", method=method)
    ys = fit(_table(x, y * c), "x", "y", method=method)
    lc = math.log10(c)
    assert xs.slope == pytest.approx(base.slope, rel=1e-9, abs=1e-9)
    assert xs.intercept == pytest.approx(base.intercept - base.slope * lc, rel=1e-9, abs=1e-9)
    assert ys.slope == pytest.approx(base.slope, rel=1e-9, abs=1e-9)
    assert ys.intercept == pytest.approx(base.intercept + lc, rel=1e-9, abs=1e-9)


# ------------------------------------------------------------------ more kinds of bad cells
# Extends tests/test_validate.py::test_property_valid_rows_pass_and_one_bad_cell_is_found
# (value, unit, source_id, basis, quantity) with other cells and other faults.
# (column changed, bad text, rule expected, column the problem is reported at); the rules are
# those of schema/tables.toml (required, number, integer, positive, nonnegative, enum) and
# the cross-column rules of comparo.validation.tables.
MORE_BAD_CELLS = [
    ("source_id", "", "required-cell", "source_id"),
    ("locator", "", "required-cell", "locator"),
    ("taxon", "", "required-cell", "taxon"),
    ("basis", "", "required-cell", "basis"),
    ("basis", "estimated", "basis-enum", "basis"),
    ("basis", "proxy", "proxy-taxon", "proxy_taxon"),
    ("basis", "computed", "computed-inputs", "inputs"),
    ("unit", "", "required-cell", "unit"),
    ("unit", "blorps per wug", "unit-unknown", "unit"),
    ("unit", "Hz", "unit-dimension", "unit"),
    ("value", "0", "value-positive", "value"),
    ("value", "-0.5", "value-positive", "value"),
    ("value", "", "required-cell", "value"),
    ("value", "inf", "value-number", "value"),
    ("n", "ten", "n-number", "n"),
    ("n", "2.5", "n-integer", "n"),
    ("n", "0", "positive", "n"),
    ("uncertainty", "-1", "nonnegative", "uncertainty"),
    ("uncertainty_kind", "stdev", "uncertainty_kind-enum", "uncertainty_kind"),
    ("temperature_c", "warm", "temperature_c-number", "temperature_c"),
]
NAMES = st.from_regex(r"[A-Z][a-z]{2,8} [a-z]{3,9}", fullmatch=True)
GOOD_ROW = st.tuples(
    NAMES,
    st.sampled_from([("body_mass", "mg"), ("fiber_radius", "um"), ("lattice_spacing_d10", "nm")]),
    st.floats(min_value=1e-3, max_value=1e3, allow_nan=False),
    st.sampled_from(["s1", "s2"]),
    st.sampled_from(["reported", "digitized"]),
)


def _good_lines(rows):
    return [
        f"o{i},{taxon},{q},{v!r},{u},,,,{s},Table 1,{b},,,"
        for i, (taxon, (q, u), v, s, b) in enumerate(rows)
    ]


@settings(max_examples=30, deadline=None, suppress_health_check=FIXTURE_OK)
@given(rows=st.lists(GOOD_ROW, min_size=1, max_size=12), data=st.data())
def test_property_more_bad_cells_found_at_row_and_column(tmp_path_factory, rows, data):
    """Several bad cells, each on its own row: every one is reported at its spreadsheet row
    (data row i is row i + 2) and column with its rule, and no error appears anywhere else."""
    k = data.draw(st.integers(1, min(len(rows), len(MORE_BAD_CELLS))))
    where = data.draw(st.lists(st.integers(0, len(rows) - 1), min_size=k, max_size=k, unique=True))
    cases = data.draw(
        st.lists(st.sampled_from(MORE_BAD_CELLS), min_size=k, max_size=k, unique=True)
    )
    lines = _good_lines(rows)
    cols = OBS_HEADER.split(",")
    assert len(cols) == len(VALID_ROWS[0].split(","))
    for i, (column, bad, _rule, _at) in zip(where, cases, strict=True):
        cells = lines[i].split(",")
        cells[cols.index(column)] = bad
        lines[i] = ",".join(cells)
    res = check(write_dataset(tmp_path_factory.mktemp("more"), lines))
    errors = res.problems[res.problems["severity"] == "error"]
    assert not res.ok
    assert set(zip(errors["row"], errors["column"], strict=True)) == {
        (i + 2, at) for i, (*_, at) in zip(where, cases, strict=True)
    }, errors.to_string()
    for i, (_c, _b, rule, at) in zip(where, cases, strict=True):
        at_cell = errors[(errors["row"] == i + 2) & (errors["column"] == at)]
        assert rule in set(at_cell["rule"]), (rule, errors.to_string())
    assert all(errors["file"] == "observations.csv")
