"""comparo.traces.oscillation against analytic loops: ellipses of known area, sinusoidal work loops
(W = pi dL dF sin(phi)), with offset, drift and noise, reversed direction, and an
independent area computation written here."""

from __future__ import annotations

import math

import numpy as np
import pytest

from comparo.traces import oscillation as loops


def trapezoid_loop_integral(x: np.ndarray, y: np.ndarray) -> float:
    """Independent route: the line integral of x dy around the closed polygon, by the
    trapezoid rule on each edge (Green's theorem: area = closed integral of x dy)."""
    xc = np.append(x, x[0])
    yc = np.append(y, y[0])
    return float(np.trapezoid(xc, yc)) if hasattr(np, "trapezoid") else float(np.trapz(xc, yc))


def test_shoelace_exact_on_polygons_of_known_area():
    # unit square counter-clockwise: area 1 exactly; clockwise: -1 (geometry, exact)
    sq_x, sq_y = np.array([0, 1, 1, 0.0]), np.array([0, 0, 1, 1.0])
    assert loops.shoelace_area(sq_x, sq_y) == 1.0
    assert loops.shoelace_area(sq_x[::-1], sq_y[::-1]) == -1.0
    # triangle with base 4 and height 3: area 6 (exact)
    assert loops.shoelace_area(np.array([0, 4, 1.0]), np.array([0, 0, 3.0])) == pytest.approx(
        6.0, abs=1e-15
    )


def test_shoelace_equals_independent_trapezoid_on_random_polygons():
    rng = np.random.default_rng(5)
    for _ in range(50):
        n = int(rng.integers(3, 40))
        ang = np.sort(rng.uniform(0, 2 * math.pi, n))
        r = rng.uniform(0.5, 2.0, n)
        x, y = r * np.cos(ang) + rng.normal(), r * np.sin(ang) + rng.normal()
        assert loops.shoelace_area(x, y) == pytest.approx(
            trapezoid_loop_integral(x, y), rel=1e-12, abs=1e-14
        )


@pytest.mark.parametrize("tilt", [0.0, 0.4, 1.3])
def test_ellipse_area_and_sign(tilt):
    # ellipse of semi-axes a, b has area pi a b (geometry); rotation and offset leave it unchanged
    a, b = 0.03, 0.011
    th = np.linspace(0, 2 * math.pi, 4000, endpoint=False)
    x = 0.1 + a * np.cos(th) * math.cos(tilt) - b * np.sin(th) * math.sin(tilt)
    y = -0.05 + a * np.cos(th) * math.sin(tilt) + b * np.sin(th) * math.cos(tilt)
    assert loops.shoelace_area(x, y) == pytest.approx(math.pi * a * b, rel=1e-5)
    assert loops.shoelace_area(x[::-1], y[::-1]) == pytest.approx(-math.pi * a * b, rel=1e-5)


def _strain_ellipse(
    f, a, b, *, t_end=1.0, rate=3000.0, noise=0.0, drift=0.0, offset=0.0, rng=None, phase0=0.37
):
    t = np.arange(0.0, t_end, 1.0 / rate) + 0.0123
    w = 2 * math.pi * f * t + phase0
    ea = offset + a * np.cos(w) + drift * t
    er = -0.5 * offset + b * np.sin(w) - 0.4 * drift * t + 0.3 * drift * t**2
    if noise:
        ea = ea + rng.normal(0, noise, len(t))
        er = er + rng.normal(0, noise, len(t))
    return t, ea, er


def test_strain_loop_area_of_an_ellipse_with_offset_drift_and_noise():
    rng = np.random.default_rng(11)
    a, b = 0.02, 0.006
    t, ea, er = _strain_ellipse(13.7, a, b, noise=2e-4, drift=4e-3, offset=0.01, rng=rng)
    res = loops.strain_loop(t, ea, er)
    assert res.cycles.frequency == pytest.approx(13.7, rel=1e-3)
    # 13.7 cycles in the record, first and last partial: 12 or 13 whole cycles
    assert res.area.n in (12, 13) and len(res.cycles.bounds) == res.area.n
    assert res.area.mean == pytest.approx(math.pi * a * b, rel=0.01)
    assert res.area.sd < 0.05 * math.pi * a * b
    # reversed direction of travel: the same magnitude, negative
    rev = loops.strain_loop(t, ea, -er + 2 * er.mean())
    assert rev.area.mean == pytest.approx(-math.pi * a * b, rel=0.01)


def test_drift_would_bias_the_area_without_its_removal():
    # a radial drift adds a spurious area of drift rate x T x mean(axial) per cycle (Green's
    # theorem); the fitted drift removal takes it out
    a, b, f = 0.02, 0.004, 10.0
    t = np.arange(0, 1.0, 1 / 4000)
    ea = 0.05 + a * np.cos(2 * math.pi * f * t)
    er = b * np.sin(2 * math.pi * f * t) + 0.02 * t
    fixed = loops.strain_loop(t, ea, er).area.mean
    raw = loops.strain_loop(t, ea, er, detrend=False).area.mean
    assert fixed == pytest.approx(math.pi * a * b, rel=2e-3)
    assert abs(raw - math.pi * a * b) > 10 * abs(fixed - math.pi * a * b)


def _sine_work_loop(f, dL, dF, phi, *, rate=5000.0, t_end=0.8, noise=0.0, drift=0.0, rng=None):
    """Length dL sin(wt) about 8 mm, force dF sin(wt - phi) about 0.3 N (phi: force lags length)."""
    t = np.arange(0.0, t_end, 1.0 / rate)
    w = 2 * math.pi * f * t
    L = 8e-3 + dL * np.sin(w) + drift * 1e-3 * t
    F = 0.3 + dF * np.sin(w - phi) + drift * 0.05 * t
    if noise:
        F = F + rng.normal(0, noise * dF, len(t))
        L = L + rng.normal(0, noise * dL, len(t))
    return t, L, F


@pytest.mark.parametrize("phi", [0.3, 1.0, math.pi / 2, 2.5, -0.8, -math.pi / 2])
def test_sinusoidal_work_loop_matches_pi_dl_df_sin_phi(phi):
    # W = closed integral of F (-dL) = pi dL dF sin(phi) for sinusoids with force lagging length by
    # phi (analytic; the work-loop technique, Josephson 1985): positive when force is high during
    # shortening
    rng = np.random.default_rng(int(1000 * (phi + 4)))
    dL, dF, f = 0.4e-3, 0.12, 25.0
    t, L, F = _sine_work_loop(f, dL, dF, phi, noise=0.02, drift=1.0, rng=rng)
    res = loops.work_loop(t, L, F)
    expected = math.pi * dL * dF * math.sin(phi)
    assert res.net_work.mean == pytest.approx(expected, rel=0.01)
    assert np.sign(res.net_work.mean) == np.sign(math.sin(phi))
    assert res.power.mean == pytest.approx(expected * f, rel=0.01)
    assert res.cycles.frequency == pytest.approx(f, rel=1e-3)


def test_work_loop_against_independent_integral_per_cycle():
    # each cycle's net work equals -(closed integral of F dL) computed here by the trapezoid rule
    rng = np.random.default_rng(3)
    t, L, F = _sine_work_loop(12.0, 0.5e-3, 0.2, 0.9, noise=0.01, rng=rng)
    res = loops.work_loop(t, L, F, detrend=False)
    for k, w in enumerate(res.net_work.values):
        x, y = res.cycles.loop(k)
        minus_f_dl = -float(
            np.sum(0.5 * (np.append(y[1:], y[0]) + y) * (np.append(x[1:], x[0]) - x))
        )
        assert w == pytest.approx(minus_f_dl, rel=1e-10)


def test_cycles_start_at_one_phase_and_partial_cycles_are_dropped():
    t = np.arange(0.0, 1.0, 1 / 2000) + 0.031
    f = 6.4
    x = np.sin(2 * math.pi * f * t + 1.1)
    y = np.cos(2 * math.pi * f * t + 1.1)
    c = loops.cycle_bounds(t, x, y)
    assert len(c.bounds) == 5  # 6.4 cycles in the record, a partial one at each end
    assert all(t[0] <= a and b <= t[-1] for a, b in c.bounds)
    for a, b in c.bounds:
        assert b - a == pytest.approx(1 / f, rel=1e-6)
        # each cycle starts at the maximum of x (cos phase 0): x(a) = 1
        assert math.sin(2 * math.pi * f * a + 1.1) == pytest.approx(1.0, abs=1e-6)


def test_volume_strain_and_isochoric_curve():
    # independent route: volume of a cylinder of length L0(1+e_a) and radius r0(1+e_r) over pi r0^2
    # L0
    ea, er = np.array([0.1, -0.05, 0.0]), np.array([-0.02, 0.03, 0.01])
    L0, r0 = 2.0, 0.3
    direct = (math.pi * (r0 * (1 + er)) ** 2 * (L0 * (1 + ea))) / (math.pi * r0**2 * L0) - 1
    assert np.allclose(loops.volume_strain(ea, er), direct, rtol=1e-12)
    # on the isochoric curve the volume does not change (exactly, by construction)
    iso = loops.isochoric_radial(ea)
    assert np.allclose(loops.volume_strain(ea, iso), 0.0, atol=1e-15)


def test_isochoric_trace_has_no_volume_change_and_no_departure():
    t = np.arange(0, 0.5, 1 / 4000)
    ea = 0.08 * np.sin(2 * math.pi * 20 * t)
    er = (1 + ea) ** -0.5 - 1
    res = loops.strain_loop(t, ea, er, detrend=False)
    assert res.volume_strain_amplitude.mean < 1e-12
    assert res.isochoric_departure.mean < 1e-12
    # radial strain held at zero: e_v = e_a, amplitude 0.08; departure RMS = RMS of the isochoric
    # curve
    flat = loops.strain_loop(
        t, ea, np.zeros_like(ea) + 1e-9 * np.cos(2 * math.pi * 20 * t), detrend=False
    )
    assert flat.volume_strain_amplitude.mean == pytest.approx(0.08, rel=1e-4)
    k = 0
    ts, xs, _ = flat.cycles.samples(k)
    rms_iso = float(np.sqrt(np.mean(((1 + xs) ** -0.5 - 1) ** 2)))
    assert flat.isochoric_departure.values[k] == pytest.approx(rms_iso, rel=1e-6)


def test_frequency_robust_to_offset_drift_and_noise():
    rng = np.random.default_rng(8)
    for f in (0.7, 3.3, 41.0, 180.0):
        t = np.sort(rng.uniform(0, 12 / f, 3000))  # uneven sampling, 12 cycles
        x = 5.0 + np.sin(2 * math.pi * f * t) + 0.3 * t * f + rng.normal(0, 0.1, len(t))
        y = -2.0 + 0.5 * np.cos(2 * math.pi * f * t) + rng.normal(0, 0.1, len(t))
        assert loops.cycle_frequency(t, [x, y]) == pytest.approx(f, rel=2e-3)


def test_too_few_cycles_and_no_oscillation_are_refused():
    t = np.linspace(0, 1, 400)
    with pytest.raises(loops.CycleError, match="whole cycle"):
        loops.work_loop(t, np.sin(2 * math.pi * 1.8 * t), np.cos(2 * math.pi * 1.8 * t))
    with pytest.raises(loops.CycleError, match="do not oscillate"):
        loops.work_loop(t, np.full_like(t, 3.0), np.full_like(t, 1.0))
    with pytest.raises(loops.CycleError, match="samples"):
        loops.work_loop(t[:10], np.sin(t[:10]), np.cos(t[:10]))


def test_frequency_refinement_matches_scipy_bounded_search():
    """The golden-section refinement of the cycle frequency gives the maximum that
    scipy.optimize.minimize_scalar (bounded) finds on the same objective (independent route)."""
    from scipy.optimize import minimize_scalar

    from comparo.traces import oscillation as loops

    rng = np.random.default_rng(3)
    for f0 in (7.3, 24.0, 151.7):
        t = np.sort(rng.uniform(0, 8 / f0, 900))
        y = np.sin(2 * np.pi * f0 * t + 0.4) + 0.05 * rng.normal(size=t.size) + 0.3 * t * f0
        f = loops.cycle_frequency(t, [y])
        tc = t - 0.5 * (t[0] + t[-1])
        d = loops._detrended(tc, y)
        ref = minimize_scalar(
            lambda q, d=d, tc=tc: -loops._explained(tc, [d / np.std(d)], q),
            bounds=(0.99 * f, 1.01 * f),
            method="bounded",
            options={"xatol": 1e-12 * f},
        )
        assert f == pytest.approx(ref.x, rel=1e-8)
        assert f == pytest.approx(f0, rel=1e-3)
