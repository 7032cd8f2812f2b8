"""Rubin's rules (comparo.fitting.pooling) against a hand computation written here.

Sources: Rubin DB (1987) Multiple imputation for nonresponse in surveys, Wiley (Q̄, Ū, B,
T = Ū + (1 + 1/m)B, df (m − 1)(1 + 1/r)²); Barnard J & Rubin DB (1999) Biometrika 86:948-955
(df with finite complete-data degrees of freedom)."""

from __future__ import annotations

import math

import pytest

from comparo.base.errors import UsageError
from comparo.fitting.pooling import rubin_pool

Q = [1.0, 1.2, 0.8, 1.1, 0.9]
U = [0.04, 0.05, 0.04, 0.06, 0.05]


def test_rubin_1987_by_hand():
    """m = 5: Q̄ = 5.0/5 = 1.0; Ū = 0.24/5 = 0.048; B = (0 + .04 + .04 + .01 + .01)/4 = 0.025;
    (1 + 1/5)B = 0.03; T = 0.078; r = 0.03/0.048 = 0.625; df = 4(1 + 1/0.625)² = 4·2.6² = 27.04;
    γ = 0.03/0.078."""
    p = rubin_pool(Q, U)
    assert p.estimate == pytest.approx(1.0, abs=1e-15)
    assert p.within == pytest.approx(0.048, abs=1e-15)
    assert p.between == pytest.approx(0.025, abs=1e-15)
    assert p.total == pytest.approx(0.078, abs=1e-15)
    assert p.se == pytest.approx(math.sqrt(0.078), rel=1e-14)
    assert p.relative_increase == pytest.approx(0.625, rel=1e-13)
    assert p.df == pytest.approx(27.04, rel=1e-13) and p.df_rule == "rubin-1987"
    assert p.missing_information == pytest.approx(0.03 / 0.078, rel=1e-13)
    lo, hi = p.ci(0.95)
    # t quantile from scipy (reference library); the interval is Q̄ ± q·√T
    from scipy.stats import t

    q = t.ppf(0.975, 27.04)
    assert (lo, hi) == pytest.approx((1 - q * math.sqrt(0.078), 1 + q * math.sqrt(0.078)))


def test_barnard_rubin_1999_by_hand():
    """ν_com = 20: ν_obs = (21/23)·20·(1 − 0.03/0.078) = (21/23)·20·(0.048/0.078);
    ν = 1/(1/27.04 + 1/ν_obs)."""
    p = rubin_pool(Q, U, df_complete=20)
    nu_obs = 21 / 23 * 20 * (0.048 / 0.078)
    assert nu_obs == pytest.approx(11.23745819, rel=1e-8)
    assert p.df == pytest.approx(1 / (1 / 27.04 + 1 / nu_obs), rel=1e-12)
    assert p.df_rule == "barnard-rubin-1999"
    assert p.df < 20  # never more than the complete data have


def test_identical_fits_have_no_between_variance():
    """Nothing imputed varies: B = 0, T = Ū; Rubin's df infinite, Barnard-Rubin's the
    complete-data (ν_com + 1)/(ν_com + 3)·ν_com."""
    p = rubin_pool([2.0] * 4, [0.01] * 4)
    assert p.between == 0 and p.total == pytest.approx(0.01) and math.isinf(p.df)
    assert p.to_dict()["df"] is None
    p = rubin_pool([2.0] * 4, [0.01] * 4, df_complete=10)
    assert p.df == pytest.approx(11 / 13 * 10)


@pytest.mark.parametrize("q, u", [([1.0], [0.1]), ([1.0, 2.0], [0.1]), ([1.0, math.nan], [1, 1])])
def test_refusals(q, u):
    with pytest.raises(UsageError):
        rubin_pool(q, u)
