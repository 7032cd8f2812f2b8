"""AICc, Delta and Akaike weights against a published worked example of model selection.

Source: J. Weiss, lecture notes "Ecology 145: Statistical analysis", lecture 17 (University of
North Carolina at Chapel Hill, spring 2006; www.unc.edu/courses/2006spring/ecol/145/001/docs/
lectures/lecture17.htm), a five-model table following Burnham & Anderson (2002, Model Selection
and Multimodel Inference, 2nd ed., ch. 2): columns log L, K, AIC, AICc, Delta_i, relative
likelihood and Akaike weight w_i. The sample size is not in the table's columns; n = 47 is the
only integer for which AICc - AIC = 2K(K+1)/(n-K-1) reproduces both published gaps (0.56 for
K = 3 and 1.46 for K = 5), and the test checks that too.

The published values are rounded (AIC, AICc and Delta to 2 decimals, weights to 3), so the
comparison is to that rounding (one AIC in the table, -33.50 for -33.5068, is off by one in
its last digit; the AICc, Delta and weight of that row match).
"""

from __future__ import annotations

import math

import pytest

from comparo.fitting.comparison import akaike_weights
from comparo.fitting.multiple import aicc

# (log L, K, AIC, AICc, Delta, relative likelihood, weight) as published
TABLE = [
    (27.1381, 3, -48.28, -47.72, 3.77, 0.152, 0.132),
    (31.4770, 5, -52.95, -51.49, 0.00, 1.000, 0.867),
    (24.5254, 5, -39.05, -37.59, 13.90, 0.001, 0.001),
    (21.7620, 5, -33.52, -32.06, 19.43, 0.000, 0.000),
    (19.7534, 3, -33.50, -32.95, 18.54, 0.000, 0.000),
]
N = 47


def test_n_is_the_one_the_published_aicc_gaps_imply():
    """For every n from 10 to 500, AICc - AIC at K = 3 and K = 5 rounded to 2 decimals must
    match the table; only n = 47 does."""
    fits = [
        n
        for n in range(10, 501)
        if all(
            abs(round(2 * k * (k + 1) / (n - k - 1), 2) - round(c - a, 2)) < 0.011
            for _, k, a, c, *_ in TABLE
        )
    ]
    assert fits == [N]


def test_aicc_delta_and_weights_reproduce_the_published_table():
    """comparo's AICc and Akaike weights from log L, K and n give the published AICc, Delta,
    relative likelihoods and weights to their rounding."""
    values = [aicc(ll, k, N) for ll, k, *_ in TABLE]
    for (ll, k, a, c, *_), v in zip(TABLE, values, strict=True):
        # AIC to 0.01: the table prints -33.50 for -33.5068 (the last row), the others rounded
        assert -2 * ll + 2 * k == pytest.approx(a, abs=0.0101)
        assert v == pytest.approx(c, abs=0.005)
    best = min(values)
    weights = akaike_weights(values)
    for (*_, delta, rel, w), v, wt in zip(TABLE, values, weights, strict=True):
        assert v - best == pytest.approx(delta, abs=0.0051)
        assert math.exp(-0.5 * (v - best)) == pytest.approx(rel, abs=0.0005)
        assert wt == pytest.approx(w, abs=0.0005)
    assert sum(weights) == pytest.approx(1.0)
    assert values.index(best) == 1  # the K = 5 model with the largest log L is the best
