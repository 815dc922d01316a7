"""Tests of simloop.fourier: samples of whole periods -> Spectrum, waveform metrics, THD and dB.

Every waveform is written here from its formula (no simloop.ideal). References are named beside
each check; [from memory] marks citations REFERENCES.md lists as recalled, not seen.
"""

from __future__ import annotations

import dataclasses
import doctest
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.typing import NDArray

import simloop.fourier as fourier
from simloop.errors import InputError
from simloop.fourier import (
    MAX_HARMONICS,
    WaveformMetrics,
    dbc,
    dbv,
    spectrum_dbv,
    spectrum_from_samples,
    thd,
    thd_rms,
    waveform_metrics,
    whole_period_window,
)
from simloop.spectrum import Spectrum

F0 = 1e3  # [Hz]
T0 = 1.0 / F0  # [s]
W0 = 2.0 * math.pi * F0  # [rad/s]


# --------------------------------------------------------------------------- sample grids
def jittered_times(
    rng: np.random.Generator, *, start: float, span: float, steps: int, jitter: float = 0.5
) -> NDArray[np.float64]:
    """``steps`` uneven steps from ``start`` to ``start + span``, each (1 +- jitter) x mean."""
    cum = np.concatenate(([0.0], np.cumsum(rng.uniform(1.0 - jitter, 1.0 + jitter, steps))))
    return start + span * cum / cum[-1]


def engine_like_times(
    rng: np.random.Generator, *, periods: int, per_period: int, period: float
) -> NDArray[np.float64]:
    """Uneven steps that shrink sharply at phases 1/4 and 3/4 of each period.

    That is where a rectified cosine has its kinks; a simulator's truncation-error step control
    crowds its time points the same way around a diode turning on or off. Map: uniform parameter
    s (jittered by +-0.3 step) -> t/T = s - sin(4 pi (s - 1/4)) / (4 pi), which is increasing and
    has zero slope and curvature at s = 1/4, 3/4 (mod 1).
    """
    m = periods * per_period
    s = (np.arange(m + 1) + rng.uniform(-0.3, 0.3, m + 1)) / per_period
    s[0], s[-1] = 0.0, float(periods)
    return period * (s - np.sin(4.0 * np.pi * (s - 0.25)) / (4.0 * np.pi))


# --------------------------------------------------------------------------- published series
def half_wave_cosine_coefficients(amplitude: float, harmonics: int) -> NDArray[np.float64]:
    """a_n of A max(0, cos wt), n = 0..harmonics (all b_n = 0).

    Spiegel, Mathematical Handbook of Formulas and Tables (Schaum), Fourier series table
    [from memory]: a0 = A/pi, a1 = A/2, even n: a_n = -(2A/pi)(-1)^(n/2)/(n^2 - 1), odd n >= 3: 0.
    """
    a = np.zeros(harmonics + 1)
    a[0] = amplitude / math.pi
    a[1] = amplitude / 2.0
    n = np.arange(2, harmonics + 1, 2)
    a[n] = -(2.0 * amplitude / math.pi) * (-1.0) ** (n // 2) / (n * n - 1.0)
    return a


def full_wave_cosine_coefficients(amplitude: float, harmonics: int) -> NDArray[np.float64]:
    """a_n of |A cos wt|: a0 = 2A/pi, even n: -(4A/pi)(-1)^(n/2)/(n^2 - 1), odd n: 0.

    Spiegel, Schaum handbook, Fourier series table [from memory].
    """
    a = np.zeros(harmonics + 1)
    a[0] = 2.0 * amplitude / math.pi
    n = np.arange(2, harmonics + 1, 2)
    a[n] = -(4.0 * amplitude / math.pi) * (-1.0) ** (n // 2) / (n * n - 1.0)
    return a


def square_wave_spectrum(harmonics: int, *, amplitude: float = 1.0) -> Spectrum:
    """+-A square wave: odd harmonics 4A/(n pi), even ones 0, no DC.

    Weisstein, "Fourier Series--Square Wave", MathWorld [confirmed].
    """
    n = np.arange(1, harmonics + 1)
    amp = np.concatenate(([0.0], np.where(n % 2 == 1, 4.0 * amplitude / (math.pi * n), 0.0)))
    return Spectrum(F0, amp, np.zeros_like(amp))


def coefficient_error(spec: Spectrum, a: NDArray[np.float64]) -> float:
    """Largest |C_n - a_n| over n = 0..N (C_0 = A0, and the reference has b_n = 0)."""
    got = np.concatenate(([spec.dc], spec.complex_amplitude))
    return float(np.max(np.abs(got - a[: spec.harmonics + 1])))


def measured_order(errors: list[float]) -> NDArray[np.float64]:
    """Convergence orders log2(e_k / e_{k+1}) for sample counts that double."""
    e = np.asarray(errors)
    return np.log2(e[:-1] / e[1:])


# --------------------------------------------------------------------------- spectrum_from_samples
@settings(max_examples=40, deadline=None)
@given(
    dc=st.floats(-2.0, 2.0),
    fundamental=st.floats(0.1, 1.0),
    harmonic_amps=st.lists(st.floats(0.0, 1.0), min_size=0, max_size=5),
    phases=st.lists(st.floats(-math.pi, math.pi), min_size=6, max_size=6),
    start_periods=st.floats(0.0, 20.0),
    periods=st.integers(1, 3),
    extra=st.floats(0.0, 0.9),
    f0=st.sampled_from([50.0, 1e3, 2.5e6]),
    seed=st.integers(0, 2**32 - 1),
    pass_periods=st.booleans(),
)
def test_spectrum_from_samples_recovers_cosine_sum(
    dc, fundamental, harmonic_amps, phases, start_periods, periods, extra, f0, seed, pass_periods
):
    # f(t) = A0 + sum A_n cos(n w t - psi_n) at absolute t: the Spectrum convention itself.
    amps = np.array([fundamental, *harmonic_amps])
    psi = np.array(phases[: amps.size])
    order = np.arange(1, amps.size + 1)
    period = 1.0 / f0
    w = 2.0 * math.pi * f0
    rng = np.random.default_rng(seed)
    span = (periods + extra) * period
    steps = int(4200 * (periods + extra)) + 1  # ~4200 uneven points per period
    t = jittered_times(rng, start=start_periods * period, span=span, steps=steps)
    v = dc + np.cos(np.multiply.outer(t, order * w) - psi) @ amps
    requested = amps.size + 6  # orders above the content must come out empty: no aliasing
    spec = spectrum_from_samples(
        t, v, fundamental_hz=f0, harmonics=requested, periods=periods if pass_periods else None
    )
    truth = np.zeros(requested, dtype=complex)
    truth[: amps.size] = amps * np.exp(-1j * psi)
    largest = max(abs(dc), float(amps.max()))
    assert abs(spec.dc - dc) <= 1e-9 * largest
    np.testing.assert_array_less(np.abs(spec.complex_amplitude - truth), 1e-9 * largest)


def test_spectrum_from_samples_integrates_spline_exactly():
    # Independent reference: QUADPACK (scipy.integrate.quad; weight='cos'/'sin' is QAWO) applied
    # knot interval by knot interval to a CubicSpline built here through the same points (the
    # window's samples plus the one before its start), in units of periods x = t/T. Coarse
    # samples (150 per period) and order 150 make a knot interval span ~2 pi of the integrand,
    # so the quadrature must split intervals.
    from scipy.integrate import quad
    from scipy.interpolate import CubicSpline

    rng = np.random.default_rng(11)
    t = jittered_times(rng, start=0.3 * T0, span=1.55 * T0, steps=232)
    v = np.exp(np.cos(W0 * t)) + 0.3 * np.maximum(0.0, np.sin(3 * W0 * t))
    spec = spectrum_from_samples(t, v, fundamental_hz=F0, harmonics=150, periods=1)
    x = t / T0
    first = np.searchsorted(x, x[-1] - 1.0, side="right") - 1
    spline = CubicSpline(x[first:], v[first:], bc_type="not-a-knot")
    edges = np.concatenate(([x[-1] - 1.0], x[first + 1 :]))
    intervals = list(zip(edges[:-1], edges[1:]))
    opts = dict(epsabs=1e-15, epsrel=1e-13, limit=200)  # ~150 intervals: <= 2e-13 in all
    mean = sum(quad(spline, lo, hi, **opts)[0] for lo, hi in intervals)
    assert spec.dc == pytest.approx(mean, rel=1e-13)
    for n in (1, 7, 40, 150):
        w = 2.0 * math.pi * n
        re_part = sum(quad(spline, lo, hi, weight="cos", wvar=w, **opts)[0] for lo, hi in intervals)
        im_part = sum(quad(spline, lo, hi, weight="sin", wvar=w, **opts)[0] for lo, hi in intervals)
        reference = 2.0 * (re_part - 1j * im_part)  # C_n = (2/T) int s e^{-j n w0 t} dt
        assert abs(spec.complex_amplitude[n - 1] - reference) <= 1e-12 * spec.dc


def test_spectrum_from_samples_half_wave_engine_like_steps_order_four():
    # Published half-wave coefficients (Spiegel [from memory]); steps crowd at the kinks as a
    # simulator's step control makes them. Sample counts double: the spline error falls ~h^4
    # (order >= 3 asserted) and beats straight lines (error ~h^2) by far more than 10x.
    rng = np.random.default_rng(5)
    a = half_wave_cosine_coefficients(1.0, 8)
    spline_err, linear_err = [], []
    for per_period in (250, 500, 1000, 2000, 4000):
        t = engine_like_times(rng, periods=1, per_period=per_period, period=T0)
        v = np.maximum(0.0, np.cos(W0 * t))
        for method, errs in (("spline", spline_err), ("linear", linear_err)):
            spec = spectrum_from_samples(t, v, fundamental_hz=F0, harmonics=8, method=method)
            errs.append(coefficient_error(spec, a))
    print("spline errors", spline_err, "linear errors", linear_err)
    assert np.all(measured_order(spline_err) >= 3.0)
    assert np.all(measured_order(linear_err) >= 1.8)
    assert np.all(np.asarray(linear_err) >= 10.0 * np.asarray(spline_err))
    assert spline_err[-1] <= 1e-12


def test_spectrum_from_samples_half_wave_kinks_on_uniform_samples_order_two():
    # The limit of any C2 interpolant: on uniform steps that land on the kinks (slope jump A w
    # at t = +-T/4) the spline cannot bend sharply and both interpolants converge as h^2 to the
    # published coefficients (Spiegel [from memory]). The DC error matches the spline kink term
    # -jump h^2/12 per kink, which here equals the straight lines' smooth-part term
    # -(h^2/12) int f'' dt: two kinks, jump w each, over one period T.
    a = half_wave_cosine_coefficients(1.0, 8)
    errors = {"spline": [], "linear": []}
    dc_errors = {"spline": [], "linear": []}
    counts = (500, 1000, 2000, 4000)
    for per_period in counts:
        t = np.linspace(0.0, T0, per_period + 1)
        v = np.maximum(0.0, np.cos(W0 * t))
        for method in errors:
            spec = spectrum_from_samples(t, v, fundamental_hz=F0, harmonics=8, method=method)
            errors[method].append(coefficient_error(spec, a))
            dc_errors[method].append(spec.dc - a[0])
    for method in errors:
        np.testing.assert_allclose(measured_order(errors[method]), 2.0, atol=0.05)
        kink_term = [-(T0 / m) ** 2 / 12.0 * 2.0 * W0 / T0 for m in counts]
        np.testing.assert_allclose(dc_errors[method], kink_term, rtol=2e-3)


def test_spectrum_from_samples_smooth_signal_spline_beats_linear():
    # A smooth probe signal (harmonics up to 5): spline error ~h^4 (de Boor, A Practical Guide to
    # Splines, 1978, ch. V [from memory]), straight lines ~h^2 (trapezoid-like).
    rng = np.random.default_rng(2)
    amps = np.array([1.0, 0.2, 0.1, 0.05, 0.02])
    psi = np.array([0.1, 0.5, -1.0, 2.0, 0.3])
    order = np.arange(1, 6)
    truth = np.concatenate(([0.3], amps * np.exp(-1j * psi), np.zeros(3)))
    errs = {"spline": [], "linear": []}
    for steps in (250, 500, 1000, 2000):
        t = jittered_times(rng, start=0.0, span=T0, steps=steps)
        v = 0.3 + np.cos(np.multiply.outer(t, order * W0) - psi) @ amps
        for method in errs:
            spec = spectrum_from_samples(t, v, fundamental_hz=F0, harmonics=8, method=method)
            got = np.concatenate(([spec.dc], spec.complex_amplitude))
            errs[method].append(float(np.max(np.abs(got - truth))))
    print("smooth: spline", errs["spline"], "linear", errs["linear"])
    assert np.all(measured_order(errs["spline"]) >= 3.5)
    np.testing.assert_allclose(measured_order(errs["linear"]), 2.0, atol=0.15)
    assert np.all(np.asarray(errs["linear"]) >= 1e3 * np.asarray(errs["spline"]))


def test_spectrum_from_samples_parseval_gap_falls_with_order():
    # |cos wt| (full-wave, kinks at +-T/4), engine-like steps. Bessel/Parseval: the RMS^2 of the
    # interpolant minus the truncated series' RMS^2 is the energy above N, so it must be > 0
    # and fall as N grows; it must match the published tail sum_{even n > N} a_n^2 / 2 (Spiegel
    # [from memory]) and the RMS must be A/sqrt(2) (REFERENCES.md, full-wave).
    rng = np.random.default_rng(8)
    t = engine_like_times(rng, periods=2, per_period=4000, period=T0)
    v = np.abs(np.cos(W0 * t))
    total = waveform_metrics(t, v, fundamental_hz=F0).rms ** 2
    assert total == pytest.approx(0.5, abs=1e-12)
    a = full_wave_cosine_coefficients(1.0, 400_000)
    orders = (2, 4, 8, 16, 32, 64)
    gaps = []
    for n in orders:
        spec = spectrum_from_samples(t, v, fundamental_hz=F0, harmonics=n)
        gaps.append(total - spec.rms**2)
        tail = 0.5 * float(np.sum(a[n + 1 :] ** 2))  # tail beyond 4e5: < 1e-17
        assert gaps[-1] == pytest.approx(tail, rel=1e-6)
    assert np.all(np.diff(gaps) < 0) and gaps[-1] > 0


def test_spectrum_from_samples_time_shift_changes_only_phases():
    # Shift theorem: f(t - d) has C_n exp(-j n w d); amplitudes are unchanged.
    rng = np.random.default_rng(4)
    t = jittered_times(rng, start=0.0, span=2.3 * T0, steps=9000)
    v = np.maximum(0.0, np.sin(W0 * t)) + 0.1 * np.cos(5 * W0 * t + 0.4)
    shift = 0.37 * T0
    base = spectrum_from_samples(t, v, fundamental_hz=F0, harmonics=30, periods=2)
    moved = spectrum_from_samples(t + shift, v, fundamental_hz=F0, harmonics=30, periods=2)
    n = np.arange(1, 31)
    expected = base.complex_amplitude * np.exp(-1j * n * W0 * shift)
    # Shifting the times re-rounds them (relative 1e-16 of t over steps of ~2.6e-7 s): 1e-13.
    np.testing.assert_allclose(moved.amplitude, base.amplitude, rtol=0, atol=1e-13)
    np.testing.assert_allclose(moved.complex_amplitude, expected, rtol=0, atol=1e-13)
    assert moved.dc == pytest.approx(base.dc, abs=1e-13)


def test_spectrum_from_samples_trailing_periods_skip_startup_transient():
    # A start-up transient 5 exp(-t/tau), tau = T/50, is below 1e-21 after the first period:
    # the last two of three periods must give the steady-state spectrum, the whole record not.
    rng = np.random.default_rng(6)
    t = jittered_times(rng, start=0.0, span=3 * T0, steps=15000)
    steady = 0.5 + np.cos(W0 * t - 0.2) + 0.25 * np.cos(2 * W0 * t + 1.1)
    v = steady + 5.0 * np.exp(-t / (T0 / 50.0))
    truth = np.array([1.0 * np.exp(-1j * 0.2), 0.25 * np.exp(-1j * -1.1), 0.0, 0.0])
    late = spectrum_from_samples(t, v, fundamental_hz=F0, harmonics=4, periods=2)
    clean = spectrum_from_samples(t, steady, fundamental_hz=F0, harmonics=4, periods=2)
    np.testing.assert_allclose(late.complex_amplitude, clean.complex_amplitude, rtol=0, atol=1e-15)
    np.testing.assert_allclose(late.complex_amplitude, truth, rtol=0, atol=1e-10)
    assert late.dc == pytest.approx(0.5, abs=1e-10)
    whole = spectrum_from_samples(t, v, fundamental_hz=F0, harmonics=4)
    assert abs(whole.dc - 0.5) > 1e-2  # the transient's mean 5 tau / 3T = 1/30 is in there


def test_spectrum_from_samples_uniform_whole_periods_not_double_counted():
    # linspace(0, 2T, 2001): first and last samples are one phase; DC must be exact, and the
    # rounded stop time 2T must still count as two whole periods.
    t = np.linspace(0.0, 2 * T0, 2001)
    v = 1.0 + np.cos(W0 * t) + 0.5 * np.sin(3 * W0 * t)
    assert whole_period_window(t, fundamental_hz=F0) == pytest.approx((0.0, 2 * T0), abs=1e-18)
    spec = spectrum_from_samples(t, v, fundamental_hz=F0, harmonics=5)
    # Counting the shared end sample twice would shift DC by v(0)/2000 = 1e-3; what is left is
    # the not-a-knot spline's end error (h^4 with h w = 2 pi/1000 at order 3), ~1e-13.
    assert spec.dc == pytest.approx(1.0, abs=1e-12)
    # sin x = cos(x - pi/2): A_3 = 0.5, psi_3 = pi/2. On uniform steps h the cubic spline passes
    # a sinusoid of phase step theta = n w h with gain sinc(theta/2)^4 * 3/(2 + cos theta) ~
    # 1 - theta^4/720 (Unser, "Splines: a perfect fit for signal and image processing," IEEE
    # Signal Processing Magazine 16(6), 1999 [from memory]); the not-a-knot ends add ~1e-13.
    theta = np.arange(1, 6) * W0 * (T0 / 1000)
    gain = np.sinc(theta / (2 * np.pi)) ** 4 * 3.0 / (2.0 + np.cos(theta))
    np.testing.assert_allclose(
        spec.amplitude[1:], gain * [1.0, 0.0, 0.5, 0.0, 0.0], rtol=0, atol=2e-13
    )
    assert spec.phase_rad[3] == pytest.approx(math.pi / 2, abs=1e-12)


def test_whole_period_window_forgives_rounding_shortfall():
    # A record one part in 1e12 short of two periods (a rounded stop time) still counts as two;
    # the first spline piece is extended over the missing sliver, so DC stays 1 (spline end
    # error ~1e-13, as in the test above) instead of losing a 1e-12 sliver or falling to 1 period.
    t = np.linspace(0.0, 2 * T0 * (1.0 - 1e-12), 2001)
    start, end = whole_period_window(t, fundamental_hz=F0)
    assert end == t[-1] and start == pytest.approx(t[-1] - 2 * T0, abs=1e-18) and start < t[0]
    spec = spectrum_from_samples(t, 1.0 + np.cos(W0 * t), fundamental_hz=F0, harmonics=3)
    assert spec.dc == pytest.approx(1.0, abs=1e-12)
    with pytest.raises(InputError, match=r"span only 1\.999 periods"):
        whole_period_window(t[:-1], fundamental_hz=F0, periods=2)


def test_whole_period_window_trailing_periods():
    t = np.linspace(0.0, 3.7 * T0, 5000)
    start, end = whole_period_window(t, fundamental_hz=F0)
    assert end == t[-1]
    assert start == pytest.approx(t[-1] - 3 * T0, abs=1e-18)
    start2, _ = whole_period_window(t, fundamental_hz=F0, periods=1)
    assert start2 == pytest.approx(t[-1] - T0, abs=1e-18)


# --------------------------------------------------------------------------- waveform_metrics
def test_waveform_metrics_sine_with_offset():
    # 2 + 3 sin wt: dc 2, rms sqrt(2^2 + 3^2/2), peak 5, trough -1, ripple 6 (common practice).
    # Spline error <= (5/384) h^4 max|f''''| ~ 1e-11 here (Hall & Meyer 1976 [from memory]).
    rng = np.random.default_rng(9)
    t = jittered_times(rng, start=0.1 * T0, span=2.5 * T0, steps=10000)
    m = waveform_metrics(t, 2.0 + 3.0 * np.sin(W0 * t), fundamental_hz=F0)
    assert m.dc == pytest.approx(2.0, abs=1e-10)
    assert m.rms == pytest.approx(math.sqrt(8.5), abs=1e-10)
    # Peak and trough are read from the samples: a sample within h of a crest of A sin falls
    # short of it by at most A (w h)^2 / 8 (Taylor expansion at the crest, first principles).
    h = float(np.max(np.diff(t)))
    short = 3.0 * (W0 * h) ** 2 / 8
    assert 5.0 - short <= m.peak <= 5.0
    assert -1.0 <= m.trough <= -1.0 + short
    assert m.ripple_pp == pytest.approx(6.0, abs=2 * short)
    assert m.crest_factor == pytest.approx(5.0 / math.sqrt(8.5), abs=short)


def test_waveform_metrics_pure_sine_crest_factor_sqrt2():
    # Crest factor of a sine: sqrt(2) (common practice).
    rng = np.random.default_rng(10)
    t = jittered_times(rng, start=0.0, span=T0, steps=5000)
    m = waveform_metrics(t, 1.7 * np.sin(W0 * t + 0.3), fundamental_hz=F0)
    h = float(np.max(np.diff(t)))  # sampled peak short of the crest by <= (w h)^2 / 8 of it
    assert m.crest_factor == pytest.approx(math.sqrt(2.0), rel=(W0 * h) ** 2 / 8)
    assert m.rms == pytest.approx(1.7 / math.sqrt(2.0), rel=1e-10)
    assert abs(m.dc) <= 1e-10


def test_waveform_metrics_half_wave_rectified_sine():
    # A max(0, cos wt) (a sine shifted in time): RMS A/2, DC A/pi (Millman & Halkias, Integrated
    # Electronics, 1972 [from memory]); peak A, trough 0, crest factor 2 (common practice).
    amplitude = 10.0
    rng = np.random.default_rng(12)
    t = engine_like_times(rng, periods=2, per_period=4000, period=T0)
    m = waveform_metrics(t, np.maximum(0.0, amplitude * np.cos(W0 * t)), fundamental_hz=F0)
    assert m.dc == pytest.approx(amplitude / math.pi, rel=1e-12)
    assert m.rms == pytest.approx(amplitude / 2.0, rel=1e-12)
    assert m.peak == pytest.approx(amplitude, rel=1e-14)
    assert m.trough == pytest.approx(0.0, abs=1e-8 * amplitude)  # spline overshoot at the kinks
    assert m.crest_factor == pytest.approx(2.0, rel=1e-12)
    lin = waveform_metrics(
        t, np.maximum(0.0, amplitude * np.cos(W0 * t)), fundamental_hz=F0, method="linear"
    )
    assert lin.trough == 0.0 and lin.peak <= amplitude


def test_waveform_metrics_is_frozen():
    t = np.linspace(0.0, T0, 101)
    m = waveform_metrics(t, np.cos(W0 * t), fundamental_hz=F0)
    assert isinstance(m, WaveformMetrics)
    with pytest.raises(dataclasses.FrozenInstanceError):
        m.rms = 0.0  # type: ignore[misc]


# --------------------------------------------------------------------------- THD and dB
def test_thd_square_wave_limit():
    # A_n/A_1 = 1/n for odd n, so THD^2 = sum_{odd n >= 3} 1/n^2 = pi^2/8 - 1 (Weisstein,
    # MathWorld "Square Wave" [confirmed]); ~48.3 % (common practice). Truncated at odd N the
    # missing tail lies between 1/(2(N+2)) and 1/(2N) (integral test).
    n_top = 9999
    value = thd(square_wave_spectrum(n_top))
    missing = (math.pi**2 / 8.0 - 1.0) - value**2
    assert 1.0 / (2 * (n_top + 2)) < missing < 1.0 / (2 * n_top)
    assert round(100 * value, 1) == 48.3


def test_thd_max_order_sums_orders_two_to_max():
    # By hand: orders 2..5 of the square wave: sqrt((1/3)^2 + (1/5)^2).
    spec = square_wave_spectrum(15)
    assert thd(spec, max_order=5) == pytest.approx(math.sqrt(1 / 9 + 1 / 25), rel=1e-15)
    assert thd(spec, max_order=1) == 0.0
    assert thd(spec, max_order=15) == pytest.approx(thd(spec), rel=0)


def test_thd_half_wave_published_value():
    # Half-wave THD re fundamental = sqrt(1 - 8/pi^2) = 0.43524 (Rashid, Power Electronics, ch. 3
    # [from memory]) from Spiegel's coefficients [from memory]; tail beyond n = 2000 < 1e-10.
    a = half_wave_cosine_coefficients(1.0, 2000)
    spec = Spectrum.from_coefficients(50.0, a=a, b=np.zeros_like(a))
    assert thd(spec) == pytest.approx(math.sqrt(1.0 - 8.0 / math.pi**2), rel=1e-9)


def test_thd_rms_square_wave_and_identity():
    # THD-R = THD-F / sqrt(1 + THD-F^2) (Shmilovitz, IEEE Trans. Power Delivery 20(1), 2005
    # [from memory]); for the square wave it tends to sqrt(1 - 8/pi^2).
    spec = square_wave_spectrum(9999)
    f = thd(spec)
    assert thd_rms(spec) == pytest.approx(f / math.sqrt(1.0 + f * f), rel=1e-14)
    assert thd_rms(spec) == pytest.approx(math.sqrt(1.0 - 8.0 / math.pi**2), abs=1e-4)
    assert thd_rms(spec, max_order=3) == pytest.approx((1 / 3) / math.sqrt(1 + 1 / 9), rel=1e-15)


def test_thd_full_wave_has_no_fundamental():
    a = full_wave_cosine_coefficients(1.0, 20)
    spec = Spectrum.from_coefficients(100.0, a=a, b=np.zeros_like(a))
    with pytest.raises(InputError, match="dc-relative metrics"):
        thd(spec)
    assert thd_rms(spec) == 1.0  # all AC content is harmonic


def test_thd_rounding_noise_fundamental_refused():
    spec = Spectrum(100.0, [0.6, 1e-17, 0.4], [0.0, 0.0, 0.0])
    with pytest.raises(InputError, match="rounding noise"):
        thd(spec)


def test_dbc_hand_values():
    # 20 log10 by hand: 0.5 -> -6.0206 dB (= 20 log10 0.5), 0.1 -> -20, 0.01 -> -40, 0 -> -inf.
    spec = Spectrum(1e6, [0.5, 2.0, 0.2, 0.0, 0.02], [0.0, 0.3, 0.0, 0.0, -1.0])
    got = dbc(spec)
    assert got.shape == (5,)
    np.testing.assert_allclose(got[[0, 1, 2, 4]], [20 * math.log10(0.25), 0.0, -20.0, -40.0],
                               rtol=1e-14, atol=1e-14)
    assert got[3] == -math.inf


def test_dbc_without_fundamental_refused():
    with pytest.raises(InputError, match="needs a fundamental"):
        dbc(Spectrum(50.0, [1.0, 0.0, 0.3], [0.0, 0.0, 0.0]))


def test_dbv_convention():
    # dBV re 1 V rms (common practice): a 1 V rms sine (sqrt 2 V peak) is 0 dBV, a 1 V peak sine
    # -10 log10 2 = -3.0103 dBV; DC levels are their own rms.
    np.testing.assert_allclose(dbv([math.sqrt(2.0), 1.0, 10 * math.sqrt(2.0)]),
                               [0.0, -10 * math.log10(2.0), 20.0], rtol=0, atol=1e-14)
    np.testing.assert_allclose(dbv([1.0, -0.1, 10.0], dc=True), [0.0, -20.0, 20.0], atol=1e-14)
    assert dbv(0.0) == -math.inf and dbv(0.0, dc=True) == -math.inf


def test_spectrum_dbv_hand_values():
    spec = Spectrum(100.0, [-2.0, math.sqrt(2.0), 0.0, 0.1 * math.sqrt(2.0)], [0.0] * 4)
    got = spectrum_dbv(spec)
    np.testing.assert_allclose(got[[0, 1, 3]], [20 * math.log10(2.0), 0.0, -20.0], atol=1e-14)
    assert got[2] == -math.inf


# --------------------------------------------------------------------------- bad input
GOOD_T = np.linspace(0.0, 2 * T0, 401)
GOOD_V = np.cos(W0 * GOOD_T)


@pytest.mark.parametrize(
    ("t", "v", "kwargs", "match"),
    [
        (GOOD_T[:150], GOOD_V[:150], {}, r"span 0\.7\d* periods .* at least one whole period"),
        (GOOD_T, GOOD_V[:-1], {}, "equal length"),
        (np.r_[GOOD_T[:10], GOOD_T[9:]], np.r_[GOOD_V[:10], GOOD_V[9:]], {}, "strictly increasing"),
        (GOOD_T[::-1], GOOD_V, {}, "strictly increasing"),
        (GOOD_T, np.where(GOOD_T > 1e-3, np.nan, GOOD_V), {}, r"v holds NaN .* index 201"),
        (np.where(GOOD_T > 1e-3, np.nan, GOOD_T), GOOD_V, {}, "t holds NaN"),
        (GOOD_T, GOOD_V, {"harmonics": 0}, "harmonics must be a whole number from 1 to 10000"),
        (GOOD_T, GOOD_V, {"harmonics": MAX_HARMONICS + 1}, "from 1 to 10000, got 10001"),
        (GOOD_T, GOOD_V, {"harmonics": 2.5}, "harmonics must be a whole number"),
        (GOOD_T, GOOD_V, {"method": "cubic"}, "unknown method 'cubic'; choose one of: spline"),
        (GOOD_T, GOOD_V, {"periods": 3}, "asked for 3 whole periods"),
        (GOOD_T, GOOD_V, {"periods": 0}, "periods must be a whole number of at least 1"),
        (GOOD_T, GOOD_V, {"fundamental_hz": -50.0}, "fundamental_hz must be a positive"),
        (GOOD_T[:3], GOOD_V[:3], {}, "at least 4 samples"),
    ],
)
def test_spectrum_from_samples_bad_input(t, v, kwargs, match):
    args = {"fundamental_hz": F0, "harmonics": 10, **kwargs}
    with pytest.raises(InputError, match=match) as info:
        spectrum_from_samples(t, v, **args)
    assert "\n" not in str(info.value)


def test_waveform_metrics_bad_input():
    with pytest.raises(InputError, match="at least one whole period"):
        waveform_metrics(GOOD_T[:150], GOOD_V[:150], fundamental_hz=F0)
    with pytest.raises(InputError, match="unknown method"):
        waveform_metrics(GOOD_T, GOOD_V, fundamental_hz=F0, method="akima")


def test_thd_bad_max_order():
    with pytest.raises(InputError, match="max_order must be a whole number from 1 to 15"):
        thd(square_wave_spectrum(15), max_order=16)


def test_dbv_bad_input():
    with pytest.raises(InputError, match="peak amplitudes >= 0"):
        dbv([1.0, -0.5])
    with pytest.raises(InputError, match="NaN"):
        dbv([math.nan])


# --------------------------------------------------------------------------- docstrings
def test_fourier_module_examples():
    result = doctest.testmod(fourier, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted >= 8 and result.failed == 0
