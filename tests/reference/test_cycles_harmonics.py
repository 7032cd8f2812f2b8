"""Loops whose signals carry harmonics, over short records: area and net work against the
exact loop integral of a harmonic loop, with and without drift, and the option that turns
drift removal off (API keyword and ``comparo cycles --no-drift-removal``)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from support import VALID_ROWS, run_main, write_dataset

from comparo.traces import oscillation as loops

F = 2.0  # Hz


def exact_loop_integral(a, phx, b, phy) -> float:
    """Closed integral of x dy over one period for x = sum_k a_k sin(k w t + phx_k),
    y = sum_k b_k sin(k w t + phy_k), k = 1, 2, ...: only equal harmonics survive
    (orthogonality of sines and cosines over a period), and
    int_0^T a_k sin(k w t + p) d/dt[b_k sin(k w t + q)] dt = a_k b_k k w (T/2) sin(p - q),
    so the integral is pi * sum_k k a_k b_k sin(phx_k - phy_k) (derived here; positive for a
    counter-clockwise loop, x horizontal)."""
    return math.pi * sum((k + 1) * a[k] * b[k] * math.sin(phx[k] - phy[k]) for k in range(len(a)))


def _harmonic(t, amps, phases):
    w = 2 * math.pi * F * t
    return sum(amps[k] * np.sin((k + 1) * w + phases[k]) for k in range(len(amps)))


def _loop_case(seed: int):
    """Fundamental 1, 2nd and 3rd harmonics of 15-20% (ordinary in measured loops), random
    phases, y lagging x by 0.3-1.2 rad per harmonic (seeded: default_rng(seed))."""
    rng = np.random.default_rng(seed)
    a = [1.0, rng.uniform(0.15, 0.2), rng.uniform(0.15, 0.2)]
    b = [1.0, rng.uniform(0.15, 0.2), rng.uniform(0.15, 0.2)]
    phx = rng.uniform(0, 2 * math.pi, 3)
    phy = phx + rng.uniform(0.3, 1.2, 3)
    return a, phx, b, phy


def test_exact_loop_integral_against_a_dense_grid():
    """The analytic value above against an independent numerical route: the trapezoid rule
    on a 200,001-point grid over one period of x dy (dy from the analytic derivative)."""
    for seed in range(5):
        a, phx, b, phy = _loop_case(seed)
        t = np.linspace(0.0, 1.0 / F, 200001)
        w = 2 * math.pi * F
        x = _harmonic(t, a, phx)
        dy = sum(b[k] * (k + 1) * w * np.cos((k + 1) * w * t + phy[k]) for k in range(3))
        dense = float(np.trapezoid(x * dy, t))
        assert dense == pytest.approx(exact_loop_integral(a, phx, b, phy), rel=1e-9)


def _signals(cycles: float, case, *, per_cycle=400, drift=True):
    a, phx, b, phy = case
    t = 0.013 + np.arange(int(round(cycles * per_cycle)) + 1) / (per_cycle * F)
    u = (t - t[0]) / (t[-1] - t[0])
    x = 3.0 + _harmonic(t, a, phx)
    y = -1.0 + _harmonic(t, b, phy)
    if drift:  # linear and quadratic drift, of the size of the harmonics or larger
        x = x + 0.3 * u + 0.2 * u**2
        y = y + 0.2 * u - 0.3 * u**2
    return t, x, y


@pytest.mark.parametrize("cycles", [3.0, 3.3, 3.7, 4.5, 6.0])
def test_harmonic_loops_within_a_tenth_of_a_percent_from_three_cycles(cycles):
    """Noise-free harmonic loops with a linear and quadratic drift, 400 samples per cycle, 3 to 6
    cycles, 8 seeded cases each: every whole cycle's net work (work loop, m and N) and loop area
    (strain cycle) is within 0.1% of the exact loop integral of the drift-free loop (the
    inscribed polygon alone is about 1.2e-4 small here: (2 pi k / N)^2 / 6 per harmonic k).
    With the drift fitted beside the fundamental alone, errors were 1-2.7%."""
    for seed in range(8):
        case = _loop_case(seed)
        exact = exact_loop_integral(*case)
        t, x, y = _signals(cycles, case)
        work = loops.work_loop(t, 1e-3 * x, 1e-2 * y)  # length mm -> m, force in N
        assert len(work.net_work.values) >= 2
        for v in work.net_work.values:
            assert v == pytest.approx(1e-5 * exact, rel=1e-3), (cycles, seed)
        strain = loops.strain_loop(t, 0.01 * x, 0.004 * y)  # strains as fractions
        for v in strain.area.values:
            assert v == pytest.approx(4e-5 * exact, rel=1e-3), (cycles, seed)
        assert work.cycles.frequency == pytest.approx(F, rel=1e-6)


def test_harmonics_are_counted_from_the_data():
    """The number of harmonics fitted beside the drift (Bayesian information criterion) is the
    number the noise-free signal holds (3 here) and 1 for a pure sinusoid in noise."""
    t, x, _ = _signals(3.7, _loop_case(1))
    tc = t - 0.5 * (t[0] + t[-1])
    assert loops.drift_of(tc, x, F)[1] == 3
    rng = np.random.default_rng(4)
    pure = np.sin(2 * math.pi * F * t + 0.3) + 0.1 * tc + rng.normal(0, 0.05, t.size)
    assert loops.drift_of(tc, pure, F)[1] == 1


def test_noise_leaves_the_harmonic_estimate_unbiased():
    """30 seeded noisy cases (noise SD 3% of the fundamental, 3.7 cycles, drift): the mean
    relative error of the net work is within 3 standard errors of zero (a simulation check;
    the tolerance is the Monte Carlo error of the mean)."""
    errs = []
    for seed in range(30):
        case = _loop_case(seed)
        t, x, y = _signals(3.7, case, per_cycle=200)
        rng = np.random.default_rng(100 + seed)
        x, y = x + rng.normal(0, 0.03, x.size), y + rng.normal(0, 0.03, y.size)
        errs.append(loops.work_loop(t, x, y).net_work.mean / exact_loop_integral(*case) - 1)
    errs = np.asarray(errs)
    assert abs(errs.mean()) < 3 * errs.std(ddof=1) / math.sqrt(errs.size) + 5e-4


@pytest.fixture
def drifting(tmp_path):
    ds = write_dataset(tmp_path / "ds", list(VALID_ROWS))
    t, x, y = _signals(4.5, _loop_case(2))
    (ds / "w.csv").write_text(
        "time_s,len_mm,force_mN\n"
        + "\n".join(f"{a:.9f},{b:.12f},{c:.12f}" for a, b, c in zip(t, x, y, strict=True))
        + "\n"
    )
    (ds / "traces.csv").write_text(
        "trace_id,file,taxon,source_id,locator,kind,time_column,time_unit,x_column,x_unit,"
        "y_column,y_unit,"
        "temperature_c,muscle\nW1,w.csv,Apis mellifera,s1,Fig. 1,work_loop,time_s,s,len_mm,mm,"
        "force_mN,mN,30,flight\n"
    )
    return ds, t, x, y


def test_drift_removal_can_be_turned_off(drifting):
    """``comparo cycles --no-drift-removal`` and ``cycles(ds, drift_removal=False)`` reduce the
    signals as recorded: each cycle's net work is then the loop integral of the raw samples
    within comparo's cycle bounds (recomputed here by the trapezoid rule on the raw signals,
    interpolated at the bounds), which the drift opens; the default removes the drift and
    gives the exact value (pi sum k a_k b_k sin(dphi), mm x mN = 1e-6 J) within 0.1%."""
    import comparo
    from comparo.traces.files import cycles

    ds, t, x, y = drifting
    exact = 1e-6 * exact_loop_integral(*_loop_case(2))
    on = json.loads(run_main("cycles", str(ds), "--format", "json").stdout)["traces"][0]
    raw = run_main("cycles", str(ds), "--format", "json", "--no-drift-removal")
    assert raw.returncode == 0, raw.stderr
    off = json.loads(raw.stdout)["traces"][0]
    assert on["net_work"] == pytest.approx(exact, rel=1e-3)
    for (a, b), v in zip(off["cycle_bounds"], off["per_cycle"]["net_work"], strict=True):
        inside = (t > a) & (t < b)
        ts = np.concatenate([[a], t[inside], [b]])
        lx, ly = np.interp(ts, t, x) * 1e-3, np.interp(ts, t, y) * 1e-3
        closed_x, closed_y = np.append(lx, lx[0]), np.append(ly, ly[0])
        assert v == pytest.approx(float(np.trapezoid(closed_x, closed_y)), rel=1e-6)
    assert abs(off["net_work"] / exact - 1) > 0.01  # the drift is there, and now it is kept
    api = cycles(comparo.load(ds), drift_removal=False).results[0]
    assert api.values["net_work"][0] == off["net_work"]
    text = run_main("cycles", str(ds), "--no-drift-removal").stdout
    assert "no drift removed" in text
