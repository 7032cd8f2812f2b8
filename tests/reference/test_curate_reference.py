"""Temperature normalisation and standard uncertainties against published relations
(check values of the methods reference, recomputed independently here)."""

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from comparo.curation.harmonise import (
    q10_from_activation_energy,
    standard_uncertainty,
    temperature_factor,
)


def test_q10_definition_worked_example():
    """Q10 = (R2/R1)^(10/(T2-T1)): 12 s^-1 at 10 °C and 30 s^-1 at 20 °C give Q10 2.5
    (definition of the temperature coefficient; e.g. Bennett 1984, Am J Physiol 247:R217)."""
    f = temperature_factor(
        np.array([10.0]), 20.0, np.array([2.5]), np.array([np.nan]), np.array([False])
    )
    assert 12 * f[0] == pytest.approx(30.0, rel=1e-12)


def test_q10_20_to_37_c():
    """20 -> 37 °C at Q10 2.5 multiplies a rate by 2.5^1.7 = 4.74786 (arithmetic)."""
    f = temperature_factor(
        np.array([20.0]), 37.0, np.array([2.5]), np.array([np.nan]), np.array([False])
    )
    assert f[0] == pytest.approx(4.74786, rel=1e-5)


def test_times_get_the_reciprocal_factor():
    """A relaxation time is 1/rate, so it shortens by the rate's factor on warming."""
    f = temperature_factor(
        np.array([15.0]), 25.0, np.array([2.0]), np.array([np.nan]), np.array([True])
    )
    assert f[0] == pytest.approx(0.5)


def test_arrhenius_q10_from_activation_energy():
    """Arrhenius k = A exp(-Ea/RT), R = 8.314462618 J/(mol K) (CODATA 2018):
    Ea 50 kJ/mol gives Q10(20->30 °C) = 1.96735."""
    assert q10_from_activation_energy(50.0, 20.0, 30.0) == pytest.approx(1.96735, rel=1e-5)
    f = temperature_factor(
        np.array([20.0]), 30.0, np.array([np.nan]), np.array([50.0]), np.array([False])
    )
    assert f[0] == pytest.approx(1.96735, rel=1e-5)


def test_q10_2_equals_activation_energy_51_2_kj():
    """Q10 2 over 20-30 °C corresponds to Ea = 51.216 kJ/mol (inverse of the Arrhenius relation)."""
    assert q10_from_activation_energy(51.216, 20.0, 30.0) == pytest.approx(2.0, rel=1e-4)


def test_standard_uncertainty_conversions():
    """GUM (JCGM 100:2008): se = sd/sqrt(n); a 95% CI half-width over t(0.975, n-1)
    (scipy.stats as the independent quantile); a rectangular half-range a -> a/sqrt(3) (GUM
    4.3.7)."""
    u = pd.Series([2.0, 2.0, 1.5, 3.0, 1.0])
    kind = pd.Series(["sd", "sd", "se", "ci95", "range_half"])
    n = pd.Series([4.0, np.nan, 9.0, 11.0, np.nan])
    got = standard_uncertainty(u, kind, n).to_numpy()
    want = [1.0, 2.0, 1.5, 3.0 / stats.t.ppf(0.975, 10), 1.0 / math.sqrt(3)]
    np.testing.assert_allclose(got, want, rtol=1e-10)


def test_ci95_without_n_uses_normal_quantile():
    """common practice: a 95% half-width with unknown n is divided by 1.96."""
    got = standard_uncertainty(pd.Series([1.96]), pd.Series(["ci95"]), pd.Series([np.nan]))
    assert got.iat[0] == pytest.approx(1.0, rel=1e-3)


def test_inverse_variance_mean_equals_intercept_only_wls(tmp_path):
    """The per-taxon inverse-variance weighted mean and its standard error equal an
    intercept-only weighted least squares fit (statsmodels WLS, weights 1/u^2) with
    the scale fixed at 1 (the u are known standard uncertainties)."""
    import statsmodels.api as sm
    from support import write_dataset

    import comparo

    v = np.array([10.0, 11.0, 10.4])
    u = np.array([0.5, 0.8, 0.6])
    hdr = (
        "obs_id,taxon,quantity,value,unit,uncertainty,uncertainty_kind,n,source_id,locator,"
        "basis,inputs,proxy_taxon,temperature_c"
    )
    rows = [
        f"o{i},Apis mellifera,fiber_radius,{a},um,{b},se,,s1,T{i},reported,,,"
        for i, (a, b) in enumerate(zip(v, u, strict=True))
    ]
    tab = comparo.tabulate(comparo.load(write_dataset(tmp_path / "w", rows, header=hdr)))
    wls = sm.WLS(v, np.ones((3, 1)), weights=1 / u**2).fit(
        cov_type="fixed scale", cov_kwds={"scale": 1.0}
    )
    assert tab["fiber_radius"].iat[0] == pytest.approx(wls.params[0], rel=1e-12)
    # the values agree within their uncertainties (Birge ratio < 1), so no inflation
    assert tab["fiber_radius_u"].iat[0] == pytest.approx(wls.bse[0], rel=1e-12)
