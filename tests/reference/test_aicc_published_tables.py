"""AICc, Delta and Akaike weights against two published model-selection tables.

Sources (journal articles; the numbers are copied from their tables as printed):

* AICc table: PubMed Central article PMC5136135, Table 1, "Summary of model diagnostics and
  fit for four candidate population models" (seasonal and traditional von Bertalanffy growth
  functions): -ln(L), K, AIC, AICc, Delta AICc and weights of four models. The sample size is
  not printed; n = 276 is the only integer from 40 to 2,000 for which
  AICc - AIC = 2K(K + 1)/(n - K - 1) (Hurvich & Tsai 1989) reproduces all four printed gaps,
  and the first test checks that.
* Akaike weights of a larger set: Avian Diseases 54(1 Suppl):466-476 (2010),
  doi:10.1637/8914-043009-Reg.1, Table 3: AIC, Delta AIC, relative likelihood and weight of
  17 candidate models (weights follow Burnham & Anderson 2002, eq. 2.14, from any
  information criterion, so comparo's ``akaike_weights`` applies to the AIC column as well).

The printed values are rounded (AIC and AICc to 0.01, weights to 0.01), so every comparison
is to that rounding plus the rounding the inputs carry (a Delta computed from AICs rounded to
0.01 may differ by 0.01 from one computed before rounding).
"""

from __future__ import annotations

import math

import pytest

from comparo.fitting.comparison import akaike_weights
from comparo.fitting.multiple import aicc

# PMC5136135, Table 1: (-ln L, K, AIC, AICc, Delta AICc, weight) as printed
GROWTH = [
    (648.92, 32, 1361.84, 1370.53, 0.00, 1.00),
    (659.09, 29, 1376.18, 1383.26, 12.72, 0.00),
    (667.38, 30, 1394.76, 1402.35, 31.82, 0.00),
    (672.25, 27, 1398.51, 1404.60, 34.07, 0.00),
]
N_GROWTH = 276

# Avian Dis. 54:466-476, Table 3: (AIC, Delta AIC, relative likelihood, weight) as printed
OUTBREAKS = [
    (66.48, 0.00, 1.00, 0.36),
    (67.85, 1.38, 0.50, 0.18),
    (69.04, 2.57, 0.28, 0.10),
    (69.39, 2.91, 0.23, 0.08),
    (69.97, 3.49, 0.17, 0.06),
    (70.05, 3.57, 0.17, 0.06),
    (71.62, 5.14, 0.08, 0.03),
    (71.64, 5.16, 0.08, 0.03),
    (71.71, 5.23, 0.07, 0.03),
    (71.85, 5.37, 0.07, 0.03),
    (72.59, 6.11, 0.05, 0.02),
    (73.51, 7.03, 0.03, 0.01),
    (74.14, 7.66, 0.02, 0.01),
    (74.20, 7.72, 0.02, 0.01),
    (76.70, 10.21, 0.01, None),  # printed 0.01: see the test's docstring
    (77.58, 11.10, 0.00, 0.00),
    (82.41, 15.93, 0.00, 0.00),
]


def test_n_is_the_one_the_printed_aicc_gaps_imply():
    """Only n = 276 gives all four printed AICc - AIC gaps (to their rounding)."""
    fits = [
        n
        for n in range(40, 2001)
        if all(
            abs(round(2 * k * (k + 1) / (n - k - 1), 2) - round(c - a, 2)) < 0.011
            for _, k, a, c, *_ in GROWTH
        )
    ]
    assert fits == [N_GROWTH]


def test_aicc_and_delta_reproduce_the_printed_table():
    """comparo's AICc from log L = -(-ln L), K and n gives the printed AIC, AICc and Delta."""
    values = [aicc(-neg_ll, k, N_GROWTH) for neg_ll, k, *_ in GROWTH]
    for (neg_ll, k, a, c, *_), v in zip(GROWTH, values, strict=True):
        assert 2 * neg_ll + 2 * k == pytest.approx(a, abs=0.0101)  # inputs printed to 0.01
        assert v == pytest.approx(c, abs=0.0101)
    best = min(values)
    weights = akaike_weights(values)
    for (*_, delta, w), v, wt in zip(GROWTH, values, weights, strict=True):
        assert v - best == pytest.approx(delta, abs=0.0201)  # two rounded AICc values
        assert wt == pytest.approx(w, abs=0.005)
    assert values.index(best) == 0


def test_weights_of_seventeen_models_reproduce_the_printed_table():
    """Delta, relative likelihood exp(-Delta/2) and weights from the printed AIC column;
    the inputs are rounded to 0.01, so Delta may differ by 0.01 and a weight by 0.006.

    One printed weight disagrees with the table's own columns: model 15 (Delta 10.21) has a
    relative likelihood of exp(-10.21/2) = 0.006 and the likelihoods sum to 2.78, so its
    weight is 0.002, printed as 0.01. The test checks the 0.002 the other columns imply."""
    aics = [row[0] for row in OUTBREAKS]
    weights = akaike_weights(aics)
    assert sum(weights) == pytest.approx(1.0)
    assert sum(math.exp(-0.5 * (r[0] - min(aics))) for r in OUTBREAKS) == pytest.approx(
        2.78, abs=0.005
    )
    for (a, delta, rel, w), wt in zip(OUTBREAKS, weights, strict=True):
        assert a - min(aics) == pytest.approx(delta, abs=0.0101)
        assert math.exp(-0.5 * (a - min(aics))) == pytest.approx(rel, abs=0.006)
        if w is None:
            assert wt == pytest.approx(math.exp(-0.5 * delta) / 2.78, abs=0.0005)
        else:
            assert wt == pytest.approx(w, abs=0.006)
