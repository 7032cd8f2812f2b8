"""The regime of each taxon with its uncertainty: ``kinetic``, ``hydraulic`` or
``undetermined``, and the frequency observed above its smaller bound.

Every expected verdict is computed in the test from the inputs alone (own
dense computation): Π = l²·η/(k·M·τ_xb), its first-order relative standard
uncertainty sqrt(4 r_l² + r_η² + r_k² + r_M² + r_τ²) (JCGM 100:2008, 5.1.6, for a
product of powers), the 95% interval Π·exp(±1.96·u/Π) on the log scale, and for
the Monte Carlo route numpy lognormal draws of the inputs (JCGM 101:2008, 7.7).
Invented taxa.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from comparo.derivation import derive
from comparo.report.render import regime_lines

Z95 = 1.959963984540054  # standard normal 0.975 quantile (scipy.stats.norm.ppf(0.975))

# base inputs in the catalogue's units: µm, mPa·s, nm², kPa, s, Hz
L_UM, ETA, K_NM2, M_KPA = 20.0, 1.0, 100.0, 5.0


def _tau_p() -> float:
    """Poroelastic time l²·η/(k·M) in s, in SI units (own computation)."""
    return (L_UM * 1e-6) ** 2 * (ETA * 1e-3) / (K_NM2 * 1e-18 * M_KPA * 1e3)


def _row(
    taxon: str,
    pi: float,
    rel: float,
    f_rel_to_bound: float | None = None,
    f_rel_u: float = 0.02,
    tau_u: bool = True,
) -> dict:
    """A per-taxon row whose Π is *pi*, each input with relative uncertainty *rel*."""
    tau_x = _tau_p() / pi
    vals = {
        "fiber_radius": L_UM,
        "fluid_viscosity": ETA,
        "permeability": K_NM2,
        "transverse_modulus": M_KPA,
        "kinetic_time": tau_x,
    }
    row = {"taxon": taxon, "temperature_c": 25.0}
    for k, v in vals.items():
        row[k] = v
        row[f"{k}_u"] = rel * v if (tau_u or k != "kinetic_time") else np.nan
        row[f"{k}_basis"] = "reported"
        row[f"{k}_obs"] = f"{k}-{taxon}"
    if f_rel_to_bound is not None:
        f_small = min(1 / (2 * math.pi * tau_x), 1 / (2 * math.pi * _tau_p()))
        f = f_rel_to_bound * f_small
        row |= {
            "frequency_observed": f,
            "frequency_observed_u": f_rel_u * f,
            "frequency_observed_basis": "reported",
            "frequency_observed_obs": f"f-{taxon}",
        }
    return row


def _first_order_verdict(pi: float, rel: float) -> str:
    """Own verdict: the log-scale 95% interval of Π against the boundary 1."""
    r = math.sqrt(4 * rel**2 + 4 * rel**2)  # l squared (2 r), then η, k, M, τ: 4 + 1 + 1 + 1 + 1
    lo, hi = pi * math.exp(-Z95 * r), pi * math.exp(Z95 * r)
    if lo > 1:
        return "hydraulic"
    if hi < 1:
        return "kinetic"
    return "undetermined"


CASES = [  # taxon, Π, relative u of every input
    ("near_below", 0.999, 0.08),
    ("near_above", 1.015, 0.08),
    ("clear_hydraulic", 3.0, 0.05),
    ("clear_kinetic", 0.3, 0.05),
    ("tight_hydraulic", 1.2, 0.01),
    ("tight_kinetic", 0.85, 0.01),
    ("wide_hydraulic", 1.8, 0.2),
]


def test_regime_follows_the_95_interval_of_pi_first_order():
    """Own dense computation (see module docstring) against derive's regime."""
    out = derive(pd.DataFrame([_row(t, p, r) for t, p, r in CASES])).set_index("taxon")
    for t, p, r in CASES:
        assert out.loc[t, "poro_kinetic_ratio"] == pytest.approx(p, rel=1e-9)
        own = math.sqrt(8) * r * p
        assert out.loc[t, "poro_kinetic_ratio_u"] == pytest.approx(own, rel=1e-6)
        assert out.loc[t, "regime"] == _first_order_verdict(p, r), t
    # the hard cut at 1 is gone: both near-1 taxa are undetermined
    assert set(out.loc[["near_below", "near_above"], "regime"]) == {"undetermined"}
    assert set(out["regime"]) == {"kinetic", "hydraulic", "undetermined"}


def test_regime_without_an_uncertainty_of_pi_is_undetermined():
    """An input without uncertainty leaves Π without one: its interval is unknown, so the
    point value alone does not decide (rule stated in docs/methods/derived.md)."""
    out = derive(pd.DataFrame([_row("no_u", 3.0, 0.05, tau_u=False)]))
    assert np.isnan(out.loc[0, "poro_kinetic_ratio_u"])
    assert out.loc[0, "regime"] == "undetermined"
    assert "no uncertainty" in out.loc[0, "regime_method"]


def test_regime_with_monte_carlo_uses_the_mc_interval():
    """Own Monte Carlo in numpy (lognormal inputs, mean = value, sd = u; JCGM 101:2008)
    for taxa whose own 95% interval is far enough from 1 that the draws cannot disagree
    (tolerance: the interval end is at least 10% from 1 with 20,000 own draws)."""
    cases = [("a", 2.0, 0.08), ("b", 0.45, 0.08), ("c", 1.05, 0.08), ("d", 3.0, 0.3)]
    table = pd.DataFrame([_row(t, p, r) for t, p, r in cases])
    out = derive(table, mc=20000, seed=5).set_index("taxon")
    rng = np.random.default_rng(11)
    for t, p, r in cases:
        s2 = math.log1p(r * r)
        draws = np.ones(20000) * p
        for power in (2, 1, -1, -1, -1):  # l², η, 1/k, 1/M, 1/τ (each factor has mean 1)
            draws = draws * rng.lognormal(-s2 / 2, math.sqrt(s2), 20000) ** power
        lo, hi = np.quantile(draws, [0.025, 0.975])
        own = "hydraulic" if lo > 1 else "kinetic" if hi < 1 else "undetermined"
        assert min(abs(lo - 1), abs(hi - 1)) > 0.1 or own == "undetermined", t
        assert out.loc[t, "regime"] == own, (t, lo, hi)
        assert "Monte Carlo" in out.loc[t, "regime_method"]


def test_frequency_above_the_smaller_bound_beyond_its_uncertainty():
    """A taxon cycling 26% above its smaller bound with a 2% frequency uncertainty is
    above it (own log-scale 95% interval of f_obs / min bound, first order)."""
    rows = [
        _row("above", 0.3, 0.01, f_rel_to_bound=1.26),
        _row("below", 0.3, 0.01, f_rel_to_bound=0.5),
        _row("at", 3.0, 0.01, f_rel_to_bound=1.02),
        _row("none", 3.0, 0.01),
    ]
    out = derive(pd.DataFrame(rows)).set_index("taxon")
    for t, want in (("above", "above"), ("below", "below"), ("at", "undetermined")):
        ratio, u = out.loc[t, "frequency_ratio"], out.loc[t, "frequency_ratio_u"]
        # f_obs, then the inputs of the smaller bound: τ_xb alone (kinetic), or l², η, k, M
        own_r = math.sqrt(0.02**2 + (1 if t != "at" else 7) * 0.01**2)
        assert u / ratio == pytest.approx(own_r, rel=1e-6)
        lo, hi = ratio * math.exp(-Z95 * own_r), ratio * math.exp(Z95 * own_r)
        own = "above" if lo > 1 else "below" if hi < 1 else "undetermined"
        assert own == want and out.loc[t, "frequency_vs_bound"] == want, t
    assert pd.isna(out.loc["none", "frequency_vs_bound"])
    assert out.loc["above", "regime"] == "kinetic"  # the regime keeps its three values


def test_report_counts_three_regimes_and_leaves_above_bound_taxa_out():
    """The summary lines count by hand-checked categories of a small invented table."""
    d = pd.DataFrame(
        {
            "taxon": list("abcdefg"),
            "regime": [
                "kinetic",
                "kinetic",
                "hydraulic",
                "undetermined",
                "kinetic",
                None,
                "hydraulic",
            ],
            "frequency_vs_bound": ["below", "below", "below", "below", "above", None, None],
        }
    )
    (line,) = regime_lines(d, None)
    text = line["text"]
    assert "2 kinetic" in text and "2 hydraulic" in text and "1 undetermined" in text
    assert "1 above its smaller bound" in text and "1 without the inputs" in text
    assert "kinetic limited" not in text.split("(")[0]  # 2 of 6 is no majority
