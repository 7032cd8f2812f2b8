"""Student t and F quantiles of comparo.base.quantiles against scipy.special (an independent
implementation, the reference library), closed forms and a published table."""

from __future__ import annotations

import math

import pytest
from scipy.special import fdtri, stdtr, stdtrit

from comparo.base.quantiles import EXACT_DF_MAX, f_quantile, t_quantile

LEVELS = [0.55, 0.6, 0.75, 0.8, 0.9, 0.95, 0.975, 0.99, 0.995, 0.999, 1 - 1e-5, 1 - 1e-8, 1 - 1e-12]
DFS = list(range(1, 121)) + [150, 199, 200, 333, 500, 777, 999, 1000]


@pytest.mark.parametrize("df", DFS)
def test_t_quantile_matches_scipy(df):
    """scipy.special.stdtrit is accurate to about 1e-15 away from the median; so are we."""
    for q in LEVELS:
        ours, ref = t_quantile(df, q), float(stdtrit(df, q))
        assert ours == pytest.approx(ref, rel=1e-12), (df, q)
        assert t_quantile(df, 1 - q) == pytest.approx(-ref, rel=1e-12)  # symmetry


@pytest.mark.parametrize("df", [2, 3, 4, 7, 30, 57, 400])
def test_t_quantile_inverts_scipy_distribution_function(df):
    """Round trip through scipy's t distribution function (scipy.special.stdtr; for df = 1 it
    is off by about 3e-12 near the median, where the closed form below is the reference)."""
    for q in [0.5 + 1e-6, 0.6, 0.9, 0.975, 0.999]:
        assert float(stdtr(df, t_quantile(df, q))) == pytest.approx(q, abs=1e-14)


def test_t_quantile_closed_forms_near_the_median():
    """df = 1 (Cauchy): t = tan(pi (q - 1/2)); df = 2: t = (2q - 1) / sqrt(2 q (1 - q))
    (standard closed forms, e.g. Johnson, Kotz & Balakrishnan 1995, ch. 28). Near the median,
    where stdtrit itself loses digits, these are the reference."""
    for q in [0.5 + 1e-12, 0.5 + 1e-9, 0.5 + 1e-4, 0.7, 0.99]:
        assert t_quantile(1, q) == pytest.approx(math.tan(math.pi * (q - 0.5)), rel=1e-13)
        assert t_quantile(2, q) == pytest.approx(
            (2 * q - 1) / math.sqrt(2 * q * (1 - q)), rel=1e-13
        )
    assert t_quantile(9, 0.5) == 0.0


@pytest.mark.parametrize(
    "df, q, table",
    [
        # NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.2 (critical values of
        # Student's t), three decimals.
        (1, 0.975, 12.706),
        (10, 0.975, 2.228),
        (30, 0.975, 2.042),
        (5, 0.995, 4.032),
        (20, 0.95, 1.725),
        (100, 0.99, 2.364),
    ],
)
def test_t_quantile_published_table(df, q, table):
    assert round(t_quantile(df, q), 3) == table


def test_other_degrees_of_freedom_go_to_scipy():
    for df in (2.5, EXACT_DF_MAX + 1, 1e6):
        assert t_quantile(df, 0.975) == float(stdtrit(df, 0.975))
    assert f_quantile(3, 20, 0.95) == float(fdtri(3, 20, 0.95))
    assert (
        math.isnan(t_quantile(0, 0.9))
        and math.isnan(t_quantile(5, 1.0))
        and math.isnan(f_quantile(1, 5, 0.0))
    )


@pytest.mark.parametrize("d2", list(range(1, 80)) + [200, 999])
def test_f_quantiles_one_and_two_numerator_df_match_scipy(d2):
    """F(1, m) = t(m)^2; F(2, m) in closed form; both against scipy.special.fdtri."""
    for q in (0.5, 0.9, 0.95, 0.99):
        assert f_quantile(1, d2, q) == pytest.approx(float(fdtri(1, d2, q)), rel=1e-12)
        assert f_quantile(2, d2, q) == pytest.approx(float(fdtri(2, d2, q)), rel=1e-12)
