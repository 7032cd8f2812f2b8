"""The broken line (``--breakpoint``) at its edges: tied x at an end of the range, a
breakpoint on a data value, and an open data set, each against an independent search
written here (a dense grid plus bounded scalar minimisation between distinct x, residuals
computed from the fitted coefficients)."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from scipy import optimize
from support import run_main

from comparo.fitting import fit, segmented_line

K = 3  # distinct x at or below / at or above the breakpoint (docs/methods/fitting.md)


def _line_at(x: np.ndarray, y: np.ndarray, psi: float) -> tuple[np.ndarray, float]:
    """Coefficients (b0, b1, b2) of y = b0 + b1 x + b2 (x - psi)+ by scipy's least squares
    (LAPACK gelsd) and the RSS summed from the residuals."""
    from scipy import linalg

    d = np.column_stack([np.ones_like(x), x, np.clip(x - psi, 0, None)])
    coef = linalg.lstsq(d, y)[0]
    r = y - d @ coef
    return coef, float(np.sum(r * r))


def _reference(x: np.ndarray, y: np.ndarray) -> tuple[float, float, np.ndarray]:
    """Global least-squares breakpoint over [K-th smallest distinct x, K-th largest distinct x]:
    the best of a 2,001-point grid, the distinct x themselves and a bounded scalar search
    (scipy.optimize.minimize_scalar, method 'bounded', xatol 1e-12) on every interval between
    consecutive distinct x. Returns (psi, RSS, coefficients)."""
    u = np.unique(x)
    lo, hi = u[K - 1], u[-K]
    knots = u[(u >= lo) & (u <= hi)]
    cands = [*np.linspace(lo, hi, 2001), *knots]
    for a, b in zip(knots[:-1], knots[1:], strict=True):
        opt = optimize.minimize_scalar(
            lambda p: _line_at(x, y, p)[1],
            bounds=(a, b),
            method="bounded",
            options={"xatol": 1e-12},
        )
        cands.append(float(opt.x))
    vals = np.array([_line_at(x, y, c)[1] for c in cands])
    best = float(cands[int(np.argmin(vals))])
    coef, rss = _line_at(x, y, best)
    return best, rss, coef


def _agrees(s: dict, x: np.ndarray, y: np.ndarray) -> tuple[float, float, np.ndarray]:
    """comparo's breakpoint is the reference optimum and its reported line is the broken line
    fitted there (not the linearisation): same psi, RSS, intercept and both slopes; CIs
    centred on the reported slopes."""
    psi, rss, coef = _reference(x, y)
    span = float(np.ptp(x))
    assert s["rss"] <= rss * (1 + 1e-9) + 1e-12
    assert s["x_log"] == pytest.approx(psi, abs=1e-6 * span)
    assert s["rss"] == pytest.approx(rss, rel=1e-8, abs=1e-12)
    assert s["intercept"] == pytest.approx(coef[0], rel=1e-7, abs=1e-9)
    assert s["slope_left"] == pytest.approx(coef[1], rel=1e-7, abs=1e-9)
    assert s["slope_right"] == pytest.approx(coef[1] + coef[2], rel=1e-7, abs=1e-9)
    for key in ("slope_left", "slope_right"):
        lo, hi = s[f"{key}_ci"]
        assert lo < s[key] < hi and (lo + hi) / 2 == pytest.approx(s[key], rel=1e-9, abs=1e-12)
    return psi, rss, coef


def test_ties_at_both_ends_never_read_as_a_perfect_fit():
    """Four equal x at the smallest and four at the largest value (seeded noise, default_rng(7)):
    at psi = min x the design [1, x, (x - psi)+] is rank-deficient and numpy's lstsq returns no
    residual sum (documented numpy behaviour). The breakpoint must be the optimum of the
    independent search over psi with 3 distinct x on each side, not that degenerate end."""
    rng = np.random.default_rng(7)
    x = np.concatenate([[0.0] * 4, np.linspace(0.5, 9.5, 16), [10.0] * 4])
    y = 2 + 0.3 * x + 1.5 * np.clip(x - 6, 0, None) + rng.normal(0, 0.4, x.size)
    s = segmented_line(x, y)
    psi, _, _ = _agrees(s, x, y)
    assert 1.0 <= psi <= 9.0  # the reference's own range: 3rd smallest to 3rd largest distinct x
    # the same data mirrored (ties now on the other side of each end) give the mirrored break
    m = segmented_line(-x[::-1], y[::-1])
    _agrees(m, -x[::-1], y[::-1])
    assert m["x_log"] == pytest.approx(-s["x_log"], abs=1e-6)


def test_too_few_distinct_x_is_refused():
    """Twelve points on five distinct x (ties at both ends) cannot hold 3 distinct x on each
    side of a break with an interval to search: a clear usage error, not a fit."""
    from comparo.base.errors import UsageError

    x = np.repeat([1.0, 2.0, 3.0, 4.0, 5.0], [4, 1, 2, 1, 4])
    y = x + np.tile([0.1, -0.1], 6)
    with pytest.raises(UsageError, match="3 distinct x values on each side"):
        segmented_line(x, y)


def test_breakpoint_on_a_data_value_reports_the_fitted_lines_slopes():
    """x = 0..19, a true break at 10 with noise (default_rng(37), SD 1): the profile RSS is
    smallest exactly at the observation x = 10, where Muggeo's linearisation (with its step
    term) has slopes that differ from the least-squares broken line's; the reported slopes,
    intercept and RSS must be the broken line's (independent search and scipy lstsq)."""
    rng = np.random.default_rng(37)
    x = np.arange(20.0)
    y = 1 + 0.5 * x + 2 * np.clip(x - 10, 0, None) + rng.normal(0, 1.0, 20)
    psi, _, _ = _agrees(segmented_line(x, y), x, y)
    assert (
        np.min(np.abs(x - psi)) < 1e-9
    )  # the case this test is for: the optimum is an observation


@pytest.fixture(scope="module")
def stackloss() -> pd.DataFrame:
    import statsmodels.api as sm

    return sm.datasets.stackloss.load_pandas().data


def test_stack_loss_open_data(stackloss):
    """Brownlee's stack-loss data (21 runs; Brownlee 1965, Statistical Theory and Methodology in
    Science and Engineering, 2nd ed., Wiley), shipped by statsmodels
    (statsmodels.datasets.stackloss). Air flow has five ties at its smallest value (50): stack loss
    on air flow, on the data scale and on natural logs. Before the fix comparo returned the
    degenerate psi = 50 (the single line). On logs the optimum is the data value ln 62."""
    x = stackloss["AIRFLOW"].to_numpy(float)
    y = stackloss["STACKLOSS"].to_numpy(float)
    for X, Y in ((x, y), (np.log(x), np.log(y))):
        s = segmented_line(X, Y)
        psi, _, _ = _agrees(s, X, Y)
        assert psi > X.min() + 1e-6 * np.ptp(X)  # not the degenerate end (five runs at air flow 50)
    assert segmented_line(np.log(x), np.log(y))["x_log"] == pytest.approx(math.log(62.0), abs=1e-9)


def test_stack_loss_through_fit_json_and_text(stackloss, tmp_path):
    """The same data through the API and ``comparo fit --breakpoint``: the contract keys of the
    JSON ``breakpoint`` hold the broken line's numbers at the independent optimum (natural logs),
    the text prints the same slopes, and the API answers as the CLI."""
    t = pd.DataFrame(
        {
            "taxon": [f"run{i + 1}" for i in range(len(stackloss))],
            "air_flow": stackloss["AIRFLOW"],
            "stack_loss": stackloss["STACKLOSS"],
        }
    )
    path = tmp_path / "stackloss.csv"
    t.to_csv(path, index=False)
    X, Y = np.log(t["air_flow"].to_numpy(float)), np.log(t["stack_loss"].to_numpy(float))
    psi, _, coef = _reference(X, Y)
    r = run_main(
        "fit",
        str(path),
        "--x",
        "air_flow",
        "--y",
        "stack_loss",
        "--method",
        "ols",
        "--log",
        "e",
        "--breakpoint",
        "--format",
        "json",
    )
    assert r.returncode == 0, r.stderr
    bp = json.loads(r.stdout)["breakpoint"]
    assert {
        "x_log",
        "x",
        "x_ci",
        "slope_left",
        "slope_left_ci",
        "slope_right",
        "slope_right_ci",
        "p_single_line",
    } <= set(bp)
    assert bp["x_log"] == pytest.approx(psi, abs=1e-9) and bp["x"] == pytest.approx(
        math.exp(psi), rel=1e-9
    )
    assert bp["slope_left"] == pytest.approx(coef[1], rel=1e-7)
    assert bp["slope_right"] == pytest.approx(coef[1] + coef[2], rel=1e-7)
    assert bp["x_ci"][0] < bp["x"] < bp["x_ci"][1]
    api = fit(t, "air_flow", "stack_loss", "ols", log="e", breakpoint=True).breakpoint
    assert api["slope_right"] == bp["slope_right"] and api["x"] == bp["x"]
    text = run_main(
        "fit",
        str(path),
        "--x",
        "air_flow",
        "--y",
        "stack_loss",
        "--method",
        "ols",
        "--log",
        "e",
        "--breakpoint",
    )
    assert text.returncode == 0
    line = next(ln for ln in text.stdout.splitlines() if "breakpoint at" in ln)
    assert f"slopes {bp['slope_left']:.5g} | {bp['slope_right']:.5g}" in line
