"""Cycle reduction of oscillatory traces: strain loops and work loops (arrays in, numbers out).

Pure numerical functions over numpy arrays in SI units (seconds, dimensionless
strain, metres, newtons); reading, validation and provenance live in
:mod:`comparo.traces.files`. Formulas, citations and limits: docs/methods/cycles.md.

Steps for one trace (:func:`reduce_trace`):

1. **Frequency** (:func:`cycle_frequency`): a coarse peak of the Hann-windowed
   periodogram of the detrended signals, refined by maximising the variance a
   sinusoid at frequency f explains in a least-squares fit that also holds an
   offset and a quadratic drift (so offset and drift do not bias f); when a signal
   carries harmonics, refined again with them in the model
   (:func:`harmonic_frequency`).
2. **Drift removal** (:func:`drift_of`): a linear and quadratic drift is fitted
   together with the fundamental and as many harmonics as the signal carries (the
   number chosen per signal by the Bayesian information criterion) and subtracted
   (the mean level is kept); fitted beside the fundamental alone, the drift terms
   would absorb part of the harmonics over a short record.
3. **Cycles** (:func:`cycle_bounds`): every cycle starts at the same phase, the
   maximum of the fitted fundamental of x; only whole cycles inside the record
   are kept (partial cycles at either end are dropped).
4. **Per cycle**: the loop closed by values interpolated at both bounds; its
   signed area by the shoelace formula (positive counter-clockwise, x on the
   horizontal axis).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

MIN_CYCLES = 2  # whole cycles needed for a mean and an SD over cycles
MIN_SAMPLES_PER_CYCLE = 8  # common practice: fewer samples cannot trace a loop's shape
MIN_EXPLAINED = (
    0.25  # rule of thumb: a cycle needs a fundamental explaining a quarter of the variance
)


class CycleError(ValueError):
    """A trace that cannot be reduced (too short, too few cycles, no oscillation)."""


# --------------------------------------------------------------------------- geometry


def shoelace_area(x: np.ndarray, y: np.ndarray) -> float:
    """Signed area enclosed by the closed polygon (x_i, y_i), in units of x times y.

    Positive when the polygon runs counter-clockwise with x on the horizontal
    axis and y on the vertical (Gauss's area formula); the last point joins the first.
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    return 0.5 * float(np.dot(x, np.roll(y, -1)) - np.dot(np.roll(x, -1), y))


def volume_strain(axial: np.ndarray, radial: np.ndarray) -> np.ndarray:
    """Volumetric strain (dimensionless) of a cylinder with axial strain ε_a and radial
    (transverse, both transverse directions equal) strain ε_r: (1+ε_a)(1+ε_r)² − 1."""
    return (1.0 + np.asarray(axial, float)) * (1.0 + np.asarray(radial, float)) ** 2 - 1.0


def isochoric_radial(axial: np.ndarray) -> np.ndarray:
    """Radial strain (dimensionless) that keeps the volume constant at axial strain ε_a:
    (1+ε_a)^(−1/2) − 1."""
    return (1.0 + np.asarray(axial, float)) ** -0.5 - 1.0


# --------------------------------------------------------------------------- frequency


def _design(t: np.ndarray, f: float) -> np.ndarray:
    """Columns 1, t, t², cos(2πft), sin(2πft) (t centred and scaled to [-1, 1])."""
    w = 2.0 * math.pi * f * t
    span = max(float(np.max(np.abs(t))), 1e-300)
    s = t / span
    return np.column_stack([np.ones_like(t), s, s * s, np.cos(w), np.sin(w)])


def _explained(t: np.ndarray, signals: list[np.ndarray], f: float) -> float:
    """Share of each signal's drift-free variance a sinusoid at *f* explains, summed."""
    a = _design(t, f)
    ys = np.column_stack(signals)
    coef, *_ = np.linalg.lstsq(a, ys, rcond=None)  # one factorisation for every signal
    drift = a[:, :3] @ coef[:3]
    wave = a[:, 3:] @ coef[3:]
    base = np.sum((ys - drift) ** 2, axis=0)
    share = np.divide(np.sum(wave**2, axis=0), base, out=np.zeros_like(base), where=base > 0)
    return float(sum(share.tolist()))


def _detrended(t: np.ndarray, y: np.ndarray) -> np.ndarray:
    a = np.column_stack([np.ones_like(t), t, t * t])
    coef, *_ = np.linalg.lstsq(a, y, rcond=None)
    return y - a @ coef


def cycle_frequency(t: np.ndarray, signals: list[np.ndarray]) -> float:
    """Fundamental frequency in Hz of one or more signals sampled at times *t* (s).

    Coarse: peak of the summed Hann-windowed periodograms of the signals after a
    quadratic detrend (each scaled to unit variance), on a uniform resampling
    zero-padded eightfold, searched above 1.5 cycles per record. Fine: bounded
    maximisation of the variance explained by a sinusoid at f fitted together with
    an offset and a quadratic drift, within one coarse bin of the peak.

    Raises
    ------
    CycleError
        When the signals do not oscillate (no variance left after detrending).
    """
    t = np.asarray(t, float)
    tc = t - 0.5 * (t[0] + t[-1])
    duration = float(t[-1] - t[0])
    n = len(t)
    grid = np.linspace(tc[0], tc[-1], n)
    dt = duration / (n - 1)
    spectrum = None
    scaled = []
    for y in signals:
        y = np.asarray(y, float)
        d = _detrended(tc, y)
        sd = float(np.std(d))
        if not sd > 1e-9 * float(np.max(np.abs(y))) or not math.isfinite(
            sd
        ):  # rounding residue only
            continue
        scaled.append(d / sd)
        u = np.interp(grid, tc, d / sd) * np.hanning(n)
        p = np.abs(np.fft.rfft(u, 8 * n)) ** 2
        spectrum = p if spectrum is None else spectrum + p
    if spectrum is None:
        raise CycleError("the signals do not oscillate (constant after removing offset and drift)")
    freqs = np.fft.rfftfreq(8 * n, dt)
    ok = freqs >= 1.5 / duration
    if not ok.any():
        raise CycleError("the record is too short to hold 1.5 cycles of any frequency it resolves")
    i = int(np.flatnonzero(ok)[np.argmax(spectrum[ok])])
    step = freqs[1] - freqs[0]
    lo, hi = max(freqs[i] - 1.5 * step, 0.5 * freqs[i]), freqs[i] + 1.5 * step
    f_best, explained = _golden_max(lambda f: _explained(tc, scaled, f), lo, hi, 1e-10 * freqs[i])
    share = explained / len(scaled)
    if share < MIN_EXPLAINED:
        raise CycleError(
            f"no clear oscillation: a sinusoid at the best frequency ({f_best:.6g} Hz) explains "
            f"{100 * share:.0f}% of the signals' variance (at least {100 * MIN_EXPLAINED:.0f}% is "
            "needed)"
        )
    return float(f_best)


def _harmonic_design(t: np.ndarray, f: float, k: int) -> np.ndarray:
    """Columns 1, s, s², then cos and sin of 2πjft for j = 1..k (s = t scaled to [-1, 1])."""
    span = max(float(np.max(np.abs(t))), 1e-300)
    s = t / span
    w = 2.0 * math.pi * f * t
    cols = [np.ones_like(t), s, s * s]
    for j in range(1, k + 1):
        cols += [np.cos(j * w), np.sin(j * w)]
    return np.column_stack(cols)


def harmonic_frequency(t: np.ndarray, signals: list[np.ndarray], f0: float) -> tuple[float, int]:
    """Fundamental frequency in Hz of periodic signals with harmonics, refined from *f0*.

    The number of harmonics K is the largest :func:`drift_of` chooses for any signal at
    *f0*. Then f maximises the summed share of each signal's variance explained by
    offset, quadratic drift and K harmonics of f (the multi-harmonic least-squares
    periodogram; Schwarzenberg-Czerny 1996; Quinn & Hannan 2001), over f0 ± 1/(4 D)
    (D the record's duration): a scan of 4K + 1 points, then golden-section search
    within one scan step of the best. With K = 1 the model is the single sinusoid
    :func:`cycle_frequency` fitted, and *f0* is returned.
    Returns (f, K). The fundamental-only estimate is biased by harmonics over a short
    record (about 1% at 3 cycles with 20% harmonics), enough to leave them in the drift.
    """
    t = np.asarray(t, float)
    ys = np.column_stack([np.asarray(y, float) for y in signals])
    ys = ys - ys.mean(axis=0)  # the constant column is in the model: centring changes no residual
    k = max(drift_of(t, ys[:, j], f0)[1] for j in range(ys.shape[1]))
    base = np.sum(ys * ys, axis=0)
    keep = base > 0
    if k == 1 or not keep.any():
        return f0, k  # one harmonic: the single-sinusoid model cycle_frequency already fitted
    ys, base = ys[:, keep], base[keep]

    def explained(f: float) -> float:  # summed explained share (normal equations of a small design)
        a = _harmonic_design(t, f, k)
        b = a.T @ ys
        try:
            sol = np.linalg.solve(a.T @ a, b)
        except np.linalg.LinAlgError:
            sol = np.linalg.lstsq(a, ys, rcond=None)[0]
        return float(np.sum(np.sum(b * sol, axis=0) / base))

    duration = float(t[-1] - t[0])
    half = min(0.25 / duration, 0.5 * f0)
    grid = np.linspace(f0 - half, f0 + half, 4 * k + 1)
    i = int(np.argmax([explained(f) for f in grid]))
    step = grid[1] - grid[0]
    f, _ = _golden_max(explained, grid[i] - step, grid[i] + step, 1e-9 * f0)
    return float(f), k


def _golden_max(fun, lo: float, hi: float, xatol: float) -> tuple[float, float]:
    """Maximum of a unimodal *fun* on [lo, hi] by golden-section search (Kiefer 1953), to *xatol*.

    Used instead of scipy.optimize.minimize_scalar only because importing scipy.optimize
    costs a second of start-up in every command that reads a dataset with traces; within
    one periodogram bin the explained variance is unimodal, which is all the search needs.
    """
    g = (math.sqrt(5.0) - 1.0) / 2.0
    a, b = lo, hi
    c, d = b - g * (b - a), a + g * (b - a)
    fc, fd = fun(c), fun(d)
    while b - a > xatol:
        if fc >= fd:
            b, d, fd = d, c, fc
            c = b - g * (b - a)
            fc = fun(c)
        else:
            a, c, fc = c, d, fd
            d = a + g * (b - a)
            fd = fun(d)
    return (c, fc) if fc >= fd else (d, fd)


# --------------------------------------------------------------------------- cycles


@dataclass(frozen=True)
class Stat:
    """Per-cycle values of one quantity, their mean, SD (ddof 1) and count; unit as stated."""

    values: tuple[float, ...]
    mean: float
    sd: float
    n: int

    @classmethod
    def of(cls, values: Any) -> Stat:
        v = tuple(float(x) for x in values)
        arr = np.asarray(v, float)
        return cls(
            v,
            float(arr.mean()) if len(v) else math.nan,
            float(arr.std(ddof=1)) if len(v) > 1 else math.nan,
            len(v),
        )

    def scaled(self, factor: float) -> Stat:
        """The same values times *factor* (a unit change or a constant)."""
        return Stat.of([v * factor for v in self.values])


@dataclass(frozen=True)
class Cycles:
    """A trace split into whole cycles at one phase.

    ``frequency`` in Hz; ``bounds`` the start and end time (s) of each whole cycle;
    ``x`` and ``y`` the signals after drift removal (mean level kept), same units as given;
    ``frequency_cycles`` per-cycle frequencies in Hz from the phase of each cycle.
    """

    frequency: float
    bounds: tuple[tuple[float, float], ...]
    t: np.ndarray = field(repr=False)
    x: np.ndarray = field(repr=False)
    y: np.ndarray = field(repr=False)
    frequency_cycles: tuple[float, ...] = ()

    def loop(self, k: int) -> tuple[np.ndarray, np.ndarray]:
        """The closed loop of cycle *k*: samples inside it plus values interpolated at both
        bounds."""
        a, b = self.bounds[k]
        inside = (self.t > a) & (self.t < b)
        ts = np.concatenate([[a], self.t[inside], [b]])
        return np.interp(ts, self.t, self.x), np.interp(ts, self.t, self.y)

    def samples(self, k: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Times and signals of cycle *k* (the loop without its closing point)."""
        a, b = self.bounds[k]
        inside = (self.t >= a) & (self.t < b)
        return self.t[inside], self.x[inside], self.y[inside]


MAX_HARMONICS = 12  # highest harmonic the drift fit may hold (fewer when the sampling is coarser)


def drift_of(t: np.ndarray, y: np.ndarray, f: float) -> tuple[np.ndarray, int]:
    """Linear and quadratic drift of *y* (same unit) at times *t* (s, centred), and the number
    of harmonics fitted beside it.

    The drift is fitted by least squares together with the periodic part
    sum_k a_k cos(2 pi k f t) + b_k sin(2 pi k f t), k = 1..K. K runs from 1 to
    min(:data:`MAX_HARMONICS`, below the Nyquist frequency, at most a quarter of the
    columns the samples allow) and is chosen by the smallest Bayesian information
    criterion n ln(RSS_K / n) + (3 + 2K) ln n (Schwarz 1978); RSS is floored at 1e-10 of
    the signal's sum of squares about its mean, so rounding alone never adds a harmonic (a
    harmonic below that share, 1e-5 of the amplitude, is not worth a column). One Cholesky
    factor of the largest design's cross-product serves every K (nested columns: the
    residual sum after m columns is |y|² minus the first m squares of L⁻¹A'y).
    The returned drift has zero mean over the samples (the mean level is kept).
    """
    n = len(t)
    per = n / ((float(t[-1]) - float(t[0])) * f) if n > 1 else 0.0
    kmax = int(max(1, min(MAX_HARMONICS, math.ceil(per / 2.0) - 1, (n // 4 - 3) // 2)))
    y = y - float(np.mean(y))  # the constant column is in the model: centring changes no residual
    while True:
        a = _harmonic_design(t, f, kmax)
        try:
            low = np.linalg.cholesky(a.T @ a)  # A'A = L L' (L' is the R of A's QR, up to signs)
            break
        except (
            np.linalg.LinAlgError
        ):  # columns not independent on these samples (gaps, coarse sampling)
            if kmax == 1:
                raise CycleError(
                    "the drift cannot be told from the oscillation on these samples"
                ) from None
            kmax -= 1
    qy = np.linalg.solve(low, a.T @ y)  # Q'y
    total = float(y @ y)
    rss = total - np.cumsum(qy * qy)  # residual sum of squares after each added column
    floor = max(1e-10 * total, 1e-300)
    best_k, best = 1, math.inf
    for k in range(1, kmax + 1):
        m = 3 + 2 * k
        bic = n * math.log(max(float(rss[m - 1]), floor) / n) + m * math.log(n)
        if bic < best:
            best_k, best = k, bic
    m = 3 + 2 * best_k
    coef = np.linalg.solve(low[:m, :m].T, qy[:m])
    drift = a[:, 1:3] @ coef[1:3]
    return drift - float(np.mean(drift)), best_k


def _phase(t: np.ndarray, y: np.ndarray, f: float) -> float:
    """Phase θ (rad) of the fundamental of y at f: y ≈ c + R cos(2πft − θ)."""
    w = 2.0 * math.pi * f * t
    a = np.column_stack([np.ones_like(t), np.cos(w), np.sin(w)])
    coef, *_ = np.linalg.lstsq(a, y, rcond=None)
    return math.atan2(coef[2], coef[1])


def _each_oscillates(
    t: np.ndarray, signals: list[np.ndarray], names: tuple[str, ...], f: float
) -> None:
    """Refuse a loop one of whose signals does not oscillate at *f*: a constant signal (or one
    whose fundamental explains under MIN_EXPLAINED of its drift-free variance) traces no loop,
    only a line of zero area."""
    for name, y in zip(names, signals, strict=True):
        d = _detrended(t, y)
        sd = float(np.std(d))
        if not sd > 1e-9 * float(np.max(np.abs(y))) or not math.isfinite(sd):
            raise CycleError(
                f"no cycle: the {name} signal does not oscillate (constant after removing "
                "offset and drift); a loop needs both signals to vary"
            )
        share = _explained(t, [d / sd], f)
        if share < MIN_EXPLAINED:
            raise CycleError(
                f"no cycle: a sinusoid at the cycle frequency ({f:.6g} Hz) explains "
                f"{100 * share:.0f}% "
                f"of the {name} signal's variance (at least {100 * MIN_EXPLAINED:.0f}% is needed)"
            )


def cycle_bounds(
    t: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    *,
    detrend: bool = True,
    names: tuple[str, str] = ("x", "y"),
) -> Cycles:
    """Frequency, drift removal and whole cycles of one trace (see the module doc).

    Parameters
    ----------
    t : times in s, strictly increasing.
    x, y : the two signals (any units; x sets the phase at which cycles start).
    detrend : subtract the linear and quadratic drift of each signal, fitted together with
        its harmonics (:func:`drift_of`); False keeps the signals as recorded.
    names : what x and y are, for messages.

    Raises
    ------
    CycleError
        Fewer than :data:`MIN_CYCLES` whole cycles, fewer than
        :data:`MIN_SAMPLES_PER_CYCLE` samples per cycle, or either signal without an
        oscillation.
    """
    t = np.asarray(t, float)
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    if len(t) < MIN_CYCLES * MIN_SAMPLES_PER_CYCLE:
        raise CycleError(
            f"{len(t)} samples: at least {MIN_CYCLES * MIN_SAMPLES_PER_CYCLE} are needed "
            f"({MIN_CYCLES} cycles of {MIN_SAMPLES_PER_CYCLE} samples)"
        )
    t0 = 0.5 * (t[0] + t[-1])
    tc = t - t0
    f0 = cycle_frequency(t, [x, y])
    _each_oscillates(tc, [x, y], names, f0)
    f, _ = harmonic_frequency(tc, [x, y], f0)
    if detrend:
        x, y = (s - drift_of(tc, s, f)[0] for s in (x, y))
    theta = _phase(tc, x, f)  # x fundamental peaks where 2πf tc = θ + 2πk
    period = 1.0 / f
    k0 = math.ceil((tc[0] * f) - theta / (2 * math.pi) - 1e-9)
    starts = []
    k = k0
    while True:
        s = (theta / (2 * math.pi) + k) * period
        if s + period > tc[-1] + 1e-12 * period:
            break
        if s >= tc[0] - 1e-12 * period:
            starts.append(s)
        k += 1
    if len(starts) < MIN_CYCLES:
        raise CycleError(
            f"{len(starts)} whole cycle(s) at {f:.6g} Hz in a record of {t[-1] - t[0]:.6g} s; "
            f"at least {MIN_CYCLES} are needed"
        )
    per = len(t) / ((t[-1] - t[0]) * f)
    if per < MIN_SAMPLES_PER_CYCLE:
        raise CycleError(
            f"{per:.1f} samples per cycle at {f:.6g} Hz; at least {MIN_SAMPLES_PER_CYCLE} are "
            "needed"
        )
    bounds = tuple((s + t0, s + period + t0) for s in starts)
    phases = []
    for a_, b_ in bounds:
        inside = (t >= a_) & (t < b_)
        phases.append(_phase(tc[inside], x[inside], f))
    dphi = np.angle(np.exp(1j * np.diff(phases)))  # wrapped to (-π, π]
    fk = tuple(float(f / (1.0 + d / (2 * math.pi))) for d in dphi)
    return Cycles(f, bounds, t, x, y, fk)


# --------------------------------------------------------------------------- reductions


@dataclass(frozen=True)
class StrainLoop:
    """Reduction of a strain cycle (axial x, radial y; dimensionless strains).

    ``area``: signed loop area in strain space (dimensionless; positive counter-
    clockwise, axial horizontal). ``volume_strain_amplitude``: amplitude of the
    fundamental of ε_v within each cycle (dimensionless). ``isochoric_departure``:
    root-mean-square over the cycle of ε_r minus the isochoric ε_r at the same ε_a
    (dimensionless).
    """

    cycles: Cycles
    area: Stat
    volume_strain_amplitude: Stat
    isochoric_departure: Stat


@dataclass(frozen=True)
class WorkLoop:
    """Reduction of a work loop (length x in m, force y in N).

    ``net_work``: J per cycle, positive when the muscle delivers work (force higher
    during shortening: the loop runs counter-clockwise, length horizontal).
    ``power``: net work times the cycle frequency, W.
    """

    cycles: Cycles
    net_work: Stat
    power: Stat


def _fundamental_amplitude(t: np.ndarray, v: np.ndarray, f: float) -> float:
    w = 2.0 * math.pi * f * t
    a = np.column_stack([np.ones_like(t), np.cos(w), np.sin(w)])
    coef, *_ = np.linalg.lstsq(a, v, rcond=None)
    return float(math.hypot(coef[1], coef[2]))


def strain_loop(
    t: np.ndarray, axial: np.ndarray, radial: np.ndarray, *, detrend: bool = True
) -> StrainLoop:
    """Reduce a strain cycle: *t* in s, *axial* and *radial* strains dimensionless (not %)."""
    c = cycle_bounds(t, axial, radial, detrend=detrend, names=("axial strain", "radial strain"))
    areas, amps, deps = [], [], []
    for k in range(len(c.bounds)):
        lx, ly = c.loop(k)
        areas.append(shoelace_area(lx, ly))
        ts, xs, ys = c.samples(k)
        amps.append(_fundamental_amplitude(ts, volume_strain(xs, ys), c.frequency))
        deps.append(float(np.sqrt(np.mean((ys - isochoric_radial(xs)) ** 2))))
    return StrainLoop(c, Stat.of(areas), Stat.of(amps), Stat.of(deps))


def work_loop(
    t: np.ndarray, length: np.ndarray, force: np.ndarray, *, detrend: bool = True
) -> WorkLoop:
    """Reduce a work loop: *t* in s, *length* in m, *force* in N (net work in J, power in W)."""
    c = cycle_bounds(t, length, force, detrend=detrend, names=("length", "force"))
    work = [shoelace_area(*c.loop(k)) for k in range(len(c.bounds))]
    w = Stat.of(work)
    return WorkLoop(c, w, w.scaled(c.frequency))
