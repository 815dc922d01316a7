"""Tests of simloop.ideal: closed-form spectra against QUADPACK, mpmath, sympy and published values.

Every time-domain waveform used as a reference is written out in THIS file (``_case_*`` below),
sharing no code with simloop, and integrated with scipy.integrate.quad (QUADPACK QAWO,
weight='cos'/'sin'), split at every kink and jump.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import mpmath
import numpy as np
import pytest
import sympy as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate

from simloop.errors import InputError
from simloop.ideal import (
    conduction_angle_for_drop,
    full_wave_rectified,
    half_wave_rectified,
    ideal_spectrum,
    ideal_waveform,
    pulse_train,
    square_wave,
    trapezoid_envelope_corners,
    trapezoid_pulse,
    truncated_cosine,
    truncated_cosine_coefficients,
)
from simloop.spectrum import Spectrum
from simloop.vocab import WAVEFORM_KINDS

PI = math.pi
N_CHECK = 12  # orders 0..12 are compared with quadrature
QUAD_RTOL = 1e-11  # relative to the largest component; quad is asked for epsrel 1e-12 per piece


# =========================================================================== reference waveforms
@dataclass(frozen=True)
class Case:
    """One waveform written from its definition, with the window and kinks quad needs."""

    label: str
    kind: str
    params: dict
    f: Callable[[float], float]  # the waveform on [start, start + period]
    start: float  # window start [s]
    period: float  # [s]
    breaks: tuple[float, ...]  # kinks / jumps inside the window [s]
    variation: float  # total variation over one period [V] (for the Parseval tail bound)


def _case_half_wave(a: float, f0: float, reference: str) -> Case:
    w, T = 2 * PI * f0, 1 / f0
    if reference == "cosine":
        f = lambda t: a * max(0.0, math.cos(w * t))  # noqa: E731
        start, breaks = -T / 2, (-T / 4, T / 4)
    else:
        f = lambda t: a * max(0.0, math.sin(w * t))  # noqa: E731
        start, breaks = 0.0, (T / 2,)
    return Case(f"half-wave {reference} A={a} f0={f0}", "half-wave",
                dict(amplitude=a, fundamental_hz=f0, reference=reference), f, start, T, breaks, 2 * a)


def _case_full_wave(a: float, f0: float, reference: str) -> Case:
    w, T = 2 * PI * f0, 1 / f0
    if reference == "cosine":
        f = lambda t: abs(a * math.cos(w * t))  # noqa: E731
        breaks = (T / 4, 3 * T / 4)
    else:
        f = lambda t: abs(a * math.sin(w * t))  # noqa: E731
        breaks = (T / 2,)
    return Case(f"full-wave {reference} A={a} f0={f0}", "full-wave",
                dict(amplitude=a, fundamental_hz=f0, reference=reference), f, 0.0, T, breaks, 4 * a)


def _case_pulse(a: float, d: float, f0: float, delay: float) -> Case:
    T = 1 / f0
    f = lambda t: a if delay <= t < delay + d * T else 0.0  # noqa: E731  (window starts at delay)
    return Case(f"pulse A={a} d={d} f0={f0} delay={delay}", "pulse",
                dict(amplitude=a, duty=d, fundamental_hz=f0, delay=delay), f, delay, T,
                (delay + d * T,), 2 * a)


def _case_square(a: float, f0: float, delay: float, bipolar: bool) -> Case:
    T = 1 / f0
    low = -a if bipolar else 0.0
    f = lambda t: a if t < delay + T / 2 else low  # noqa: E731
    return Case(f"square A={a} f0={f0} delay={delay} bipolar={bipolar}", "square",
                dict(amplitude=a, fundamental_hz=f0, delay=delay, bipolar=bipolar), f, delay, T,
                (delay + T / 2,), 2 * (a - low))


def _case_truncated_cosine(peak: float, full_angle: float, f0: float, reference: str) -> Case:
    w, T, th = 2 * PI * f0, 1 / f0, full_angle / 2
    centre = T / 4 if reference == "sine" else 0.0
    drive = math.sin if reference == "sine" else math.cos
    f = lambda t: peak * max(0.0, drive(w * t) - math.cos(th)) / (1 - math.cos(th))  # noqa: E731
    breaks = tuple(b for b in (centre - th / w, centre + th / w)
                   if centre - T / 2 < b < centre + T / 2)
    return Case(f"truncated-cosine {math.degrees(full_angle):.1f} deg {reference}", "truncated-cosine",
                dict(peak=peak, conduction_angle=full_angle, fundamental_hz=f0, reference=reference),
                f, centre - T / 2, T, breaks, 2 * peak)  # one rise and one fall per period


def _case_trapezoid(a: float, width: float, rise: float, fall: float, f0: float, delay: float) -> Case:
    T = 1 / f0
    t1 = delay + rise  # top reached
    t2 = delay + rise / 2 + width - fall / 2  # fall starts
    t3 = t2 + fall  # fall ends

    def f(t: float) -> float:  # window [delay, delay + T]
        if rise > 0 and t < t1:
            return a * (t - delay) / rise
        if t < t2:
            return a
        if fall > 0 and t < t3:
            return a * (t3 - t) / fall
        return 0.0

    return Case(f"trapezoid A={a} tau={width} tr={rise} tf={fall} f0={f0} delay={delay}", "trapezoid",
                dict(amplitude=a, width=width, rise=rise, fall=fall, fundamental_hz=f0, delay=delay),
                f, delay, T, (t1, t2, t3), 2 * a)


QUAD_CASES = [
    _case_half_wave(1.0, 1.0, "cosine"),
    _case_half_wave(12.0, 50.0, "sine"),
    _case_full_wave(2.0, 1e3, "cosine"),
    _case_full_wave(1.0, 1.0, "sine"),
    _case_pulse(1.0, 0.25, 1.0, 0.0),
    _case_pulse(5.0, 0.3, 1e6, 0.13e-6),
    _case_pulse(1.0, 0.7, 1.0, 0.9),  # the pulse wraps across the period boundary
    _case_pulse(2.0, 0.1, 10.0, -0.037),  # negative delay
    _case_square(1.0, 1.0, 0.0, False),
    _case_square(3.3, 8e6, 0.01e-6, True),
    _case_truncated_cosine(1.0, math.radians(120.0), 1.0, "cosine"),
    _case_truncated_cosine(2.0, math.radians(240.0), 50.0, "sine"),
    _case_truncated_cosine(1.0, 2 * PI, 1.0, "cosine"),  # always conducting: raised cosine
    _case_truncated_cosine(1.0, math.radians(10.0), 1.0, "sine"),  # narrow pulse
    _case_trapezoid(1.0, 0.5e-6, 10e-9, 10e-9, 1e6, 0.0),
    _case_trapezoid(12.0, 0.8e-6, 20e-9, 150e-9, 5e5, 0.3e-6),  # rise != fall, delayed
    _case_trapezoid(1.0, 0.3, 0.2, 0.05, 1.0, 0.8),  # wraps across the period boundary
    _case_trapezoid(1.0, 0.4, 0.0, 0.1, 1.0, 0.05),  # vertical rising edge
    _case_trapezoid(1.0, 0.4, 0.15, 0.0, 1.0, 0.0),  # vertical falling edge
]


_SLIVER = 1e-9  # pieces shorter than this (in periods) are integrated by the midpoint rule


def _pieces(case: Case) -> list[tuple[float, float]]:
    """Integration pieces in units of the period, u = t / T, split at the kinks."""
    edges = sorted({case.start, *case.breaks, case.start + case.period})
    u = [e / case.period for e in edges]
    return [(lo, hi) for lo, hi in zip(u[:-1], u[1:]) if hi > lo]


def _quad_coefficients(case: Case, n_max: int) -> tuple[np.ndarray, np.ndarray]:
    """a_n = 2 int_0^1 f(uT) cos(2 pi n u) du (a_0 the mean), b_n likewise, by QUADPACK QAWO."""
    g = lambda u: case.f(u * case.period)  # noqa: E731
    a = np.zeros(n_max + 1)
    b = np.zeros(n_max + 1)
    opts = dict(epsabs=1e-13, epsrel=1e-12, limit=200)
    for lo, hi in _pieces(case):
        if hi - lo < _SLIVER:  # midpoint rule: error O(length^3), far below the tolerance
            mid, length = 0.5 * (lo + hi), hi - lo
            a[0] += g(mid) * length
            for n in range(1, n_max + 1):
                a[n] += 2 * g(mid) * math.cos(2 * PI * n * mid) * length
                b[n] += 2 * g(mid) * math.sin(2 * PI * n * mid) * length
            continue
        a[0] += integrate.quad(g, lo, hi, **opts)[0]
        for n in range(1, n_max + 1):
            a[n] += 2 * integrate.quad(g, lo, hi, weight="cos", wvar=2 * PI * n, **opts)[0]
            b[n] += 2 * integrate.quad(g, lo, hi, weight="sin", wvar=2 * PI * n, **opts)[0]
    return a, b


def _quad_mean_square(case: Case) -> float:
    g = lambda u: case.f(u * case.period) ** 2  # noqa: E731
    return sum(
        g(0.5 * (lo + hi)) * (hi - lo) if hi - lo < _SLIVER
        else integrate.quad(g, lo, hi, epsabs=1e-13, epsrel=1e-12, limit=200)[0]
        for lo, hi in _pieces(case)
    )


def _spectrum(case: Case, harmonics: int) -> Spectrum:
    return ideal_spectrum(case.kind, harmonics=harmonics, **case.params)


# =========================================================================== vs quad / mpmath / sympy
@pytest.mark.parametrize("case", QUAD_CASES, ids=lambda c: c.label)
def test_ideal_spectrum_matches_quad(case: Case) -> None:
    # Reference: scipy.integrate.quad (QUADPACK QAWO) of the definition written above, n = 0..12.
    a_ref, b_ref = _quad_coefficients(case, N_CHECK)
    a, b = _spectrum(case, N_CHECK).coefficients()
    scale = max(np.max(np.abs(a_ref)), np.max(np.abs(b_ref)))
    worst = max(np.max(np.abs(a - a_ref)), np.max(np.abs(b - b_ref))) / scale
    assert worst <= QUAD_RTOL, f"{case.label}: worst relative error {worst:.2e}"


def test_half_wave_rectified_matches_mpmath_fourier() -> None:
    # Reference: mpmath.fourier (Gauss-Legendre at 30 digits, split at the kinks; c0 is the mean).
    with mpmath.workdps(30):
        f = lambda x: max(mpmath.mpf(0), 3 * mpmath.cos(x))  # noqa: E731
        c, s = mpmath.fourier(f, [-mpmath.pi, -mpmath.pi / 2, mpmath.pi / 2, mpmath.pi], N_CHECK)
    a, b = half_wave_rectified(3.0, harmonics=N_CHECK, fundamental_hz=1 / (2 * PI)).coefficients()
    np.testing.assert_allclose(a, np.array(c, dtype=float), rtol=0, atol=3e-15 * 3)
    np.testing.assert_allclose(b, np.array(s, dtype=float), rtol=0, atol=3e-15 * 3)


def test_trapezoid_pulse_matches_mpmath_fourier() -> None:
    # Reference: mpmath.fourier on [0, 1] split at the slope breakpoints; rise != fall, delayed.
    A, tau, tr, tf, t0 = 2.0, 0.35, 0.1, 0.04, 0.2
    t1, t2 = t0 + tr, t0 + tr / 2 + tau - tf / 2
    t3 = t2 + tf

    def f(t):  # on [t0, t0 + 1]
        if t < t1:
            return A * (t - t0) / tr
        if t < t2:
            return mpmath.mpf(A)
        if t < t3:
            return A * (t3 - t) / tf
        return mpmath.mpf(0)

    with mpmath.workdps(30):
        c, s = mpmath.fourier(f, [t0, t1, t2, t3, t0 + 1], N_CHECK)
    a, b = trapezoid_pulse(A, tau, rise=tr, fall=tf, harmonics=N_CHECK, delay=t0).coefficients()
    np.testing.assert_allclose(a, np.array(c, dtype=float), rtol=0, atol=3e-15 * A)
    np.testing.assert_allclose(b, np.array(s, dtype=float), rtol=0, atol=3e-15 * A)


def test_truncated_cosine_matches_mpmath_fourier() -> None:
    # Reference: mpmath.fourier of the truncated cosine, 100 deg full angle, sine reference.
    th = mpmath.radians(50)
    with mpmath.workdps(30):
        def f(x):
            return max(mpmath.mpf(0), mpmath.sin(x) - mpmath.cos(th)) / (1 - mpmath.cos(th))

        c, s = mpmath.fourier(
            f, [-mpmath.pi / 2, mpmath.pi / 2 - th, mpmath.pi / 2 + th, 3 * mpmath.pi / 2], N_CHECK
        )
    a, b = truncated_cosine(1.0, math.radians(100.0), harmonics=N_CHECK, fundamental_hz=1 / (2 * PI),
                            reference="sine").coefficients()
    np.testing.assert_allclose(a, np.array(c, dtype=float), rtol=0, atol=3e-15)
    np.testing.assert_allclose(b, np.array(s, dtype=float), rtol=0, atol=3e-15)


def test_half_wave_rectified_matches_sympy_fourier_series() -> None:
    # Reference: sympy.fourier_series of Piecewise(cos x on |x| < pi/2, 0), exact rationals / pi.
    x = sp.symbols("x", real=True)
    fs = sp.fourier_series(sp.Piecewise((sp.cos(x), (x > -sp.pi / 2) & (x < sp.pi / 2)), (0, True)),
                           (x, -sp.pi, sp.pi))
    a_ref = [float(fs.a0)] + [float(fs.an.coeff(n).subs(x, 0)) for n in range(1, 9)]
    b_ref = [0.0] + [float(fs.bn.coeff(n).subs(x, PI / (2 * n))) for n in range(1, 9)]
    a, b = half_wave_rectified(1.0, harmonics=8, fundamental_hz=1 / (2 * PI)).coefficients()
    np.testing.assert_allclose(a, a_ref, rtol=0, atol=1e-15)
    np.testing.assert_allclose(b, b_ref, rtol=0, atol=1e-15)


def test_truncated_cosine_coefficients_small_angle_vs_mpmath() -> None:
    # Reference: the closed forms (Cripps ch. 3 [from memory]) evaluated by mpmath at 60 digits,
    # where their cancellation at small theta costs nothing. Covers both sides of the series switch.
    for theta in (1e-7, 1e-4, 1e-2, 0.05, 0.3, 1.0, 1.9, 3.0, PI):
        got = truncated_cosine_coefficients(theta, harmonics=80)
        with mpmath.workdps(60):
            t = mpmath.mpf(theta)
            omc = 1 - mpmath.cos(t)
            ref = [(mpmath.sin(t) - t * mpmath.cos(t)) / (mpmath.pi * omc),
                   (t - mpmath.sin(t) * mpmath.cos(t)) / (mpmath.pi * omc)]
            ref += [2 * (mpmath.sin(n * t) * mpmath.cos(t) - n * mpmath.cos(n * t) * mpmath.sin(t))
                    / (mpmath.pi * n * (n * n - 1) * omc) for n in range(2, 81)]
        ref = np.array(ref, dtype=float)
        np.testing.assert_allclose(got, ref, rtol=0, atol=1e-15 * np.max(np.abs(ref)),
                                   err_msg=f"theta={theta}")


# =========================================================================== published values
def test_half_wave_rectified_published_coefficients() -> None:
    # Spiegel, Schaum handbook, Fourier series table [from memory]; Rashid ch. 3 [from memory].
    A = 12.0
    a, b = half_wave_rectified(A, harmonics=12).coefficients()
    assert a[0] == pytest.approx(A / PI, rel=1e-15)
    assert a[1] == pytest.approx(A / 2, rel=1e-15)
    for n in range(2, 13, 2):
        assert a[n] == pytest.approx(-(2 * A / PI) * (-1) ** (n // 2) / (n * n - 1), rel=1e-14)
    np.testing.assert_allclose(a[3::2], 0.0, atol=1e-15 * A)
    np.testing.assert_allclose(b, 0.0, atol=1e-15 * A)
    # printed figures, 6 decimals
    np.testing.assert_allclose(a[[2, 4, 6]] / A, [0.212207, -0.042441, 0.018189], rtol=0, atol=5e-7)


def test_half_wave_rectified_sine_reference_published() -> None:
    # A max(0, sin wt) = A/pi + (A/2) sin wt - (2A/pi) sum cos(2k wt)/(4k^2 - 1)  (Spiegel [from memory])
    A = 10.0
    a, b = half_wave_rectified(A, harmonics=12, reference="sine").coefficients()
    assert a[0] == pytest.approx(A / PI, rel=1e-15)
    assert b[1] == pytest.approx(A / 2, rel=1e-15)
    k = np.arange(1, 7)
    np.testing.assert_allclose(a[2::2], -(2 * A / PI) / (4 * k**2 - 1), rtol=1e-14)
    np.testing.assert_allclose(a[1::2], 0.0, atol=1e-15 * A)
    np.testing.assert_allclose(np.delete(b, 1), 0.0, atol=1e-15 * A)


def test_half_wave_rectified_rms_and_thd() -> None:
    # Spiegel / Rashid [from memory]: RMS = A/2, THD re fundamental = 0.43524. Exactly, with
    # RMS = A/2, A0 = A/pi, A1 = A/2:
    # THD^2 = (RMS^2 - A0^2 - A1^2/2) / (A1^2/2) = (1/4 - 1/pi^2 - 1/8) * 8 = 1 - 8/pi^2.
    A = 1.0
    s = half_wave_rectified(A, harmonics=10_000)
    thd = math.sqrt(np.sum(s.amplitude[2:] ** 2)) / s.amplitude[1]
    assert thd == pytest.approx(math.sqrt(1 - 8 / PI**2), rel=1e-12)  # tail beyond 10^4 ~ 1e-13
    assert round(thd, 5) == 0.43524
    assert s.rms == pytest.approx(A / 2, rel=1e-12)


def test_full_wave_rectified_published_coefficients() -> None:
    # Spiegel [from memory]: |A cos wt|: a0 = 2A/pi, even a_n = -(4A/pi)(-1)^(n/2)/(n^2 - 1), RMS A/sqrt 2.
    A = 5.0
    s = full_wave_rectified(A, harmonics=10_000)
    a, b = s.truncated(12).coefficients()
    assert a[0] == pytest.approx(2 * A / PI, rel=1e-15)
    for n in range(2, 13, 2):
        assert a[n] == pytest.approx(-(4 * A / PI) * (-1) ** (n // 2) / (n * n - 1), rel=1e-14)
    np.testing.assert_allclose(a[1::2], 0.0, atol=1e-15 * A)
    np.testing.assert_allclose(b, 0.0, atol=1e-15 * A)
    assert s.rms == pytest.approx(A / math.sqrt(2), rel=1e-12)


def test_pulse_train_published_quarter_duty() -> None:
    # Oppenheim & Willsky, Signals and Systems 2nd ed., Example 3.5 [from memory]:
    # DC = A d, A_n = (2A/(n pi)) |sin(n pi d)|; d = 0.25: 0.450158, 0.318310, 0.150053, 0.
    A, d = 2.0, 0.25
    s = pulse_train(A, d, harmonics=12)
    assert s.dc == pytest.approx(A * d, rel=1e-15)
    n = np.arange(1, 13)
    np.testing.assert_allclose(s.amplitude[1:], 2 * A / (n * PI) * np.abs(np.sin(n * PI * d)),
                               rtol=0, atol=1e-15 * A)
    np.testing.assert_allclose(s.amplitude[1:5] / A, [0.450158, 0.318310, 0.150053, 0.0], rtol=0, atol=5e-7)


def test_square_wave_published_weisstein() -> None:
    # Weisstein, "Fourier Series--Square Wave", MathWorld [confirmed]: +-A odd wave has
    # b_n = 4A/(n pi) for odd n, nothing else; unipolar 0..A: DC A/2, odd harmonics 2A/(n pi).
    A = 1.5
    n = np.arange(1, 13)
    odd = n % 2 == 1
    a, b = square_wave(A, harmonics=12, bipolar=True).coefficients()
    assert a[0] == 0.0
    np.testing.assert_allclose(a[1:], 0.0, atol=1e-15 * A)
    np.testing.assert_allclose(b[1:], np.where(odd, 4 * A / (n * PI), 0.0), rtol=0, atol=1e-15 * A)
    s = square_wave(A, harmonics=12)
    assert s.dc == pytest.approx(A / 2, rel=1e-15)
    np.testing.assert_allclose(s.amplitude[1:], np.where(odd, 2 * A / (n * PI), 0.0), rtol=0, atol=1e-15 * A)


def test_truncated_cosine_coefficients_published_table() -> None:
    # Cripps, RF Power Amplifiers 2nd ed. ch. 3 [from memory]; Krauss, Bostian & Raab [from memory]:
    # alpha_0..alpha_3 at half-angles 60, 90, 120 deg, printed to 4 decimals.
    table = {
        60.0: [0.2180, 0.3910, 0.2757, 0.1378],
        90.0: [0.3183, 0.5000, 0.2122, 0.0],
        120.0: [0.4060, 0.5363, 0.0919, -0.0459],
    }
    for deg, printed in table.items():
        got = truncated_cosine_coefficients(math.radians(deg), harmonics=3)
        np.testing.assert_allclose(got, printed, rtol=0, atol=5e-5, err_msg=f"{deg} deg")
        # and the exact closed forms, evaluated here (no cancellation at these angles)
        t = math.radians(deg)
        c, s_, omc = math.cos(t), math.sin(t), 1 - math.cos(t)
        exact = [(s_ - t * c) / (PI * omc), (t - s_ * c) / (PI * omc)]
        exact += [2 * (math.sin(n * t) * c - n * math.cos(n * t) * s_) / (PI * n * (n * n - 1) * omc)
                  for n in (2, 3)]
        np.testing.assert_allclose(got, exact, rtol=0, atol=1e-15)


def test_trapezoid_pulse_published_paul() -> None:
    # C. R. Paul, Introduction to EMC 2nd ed., sec. 3.2 [from memory]:
    # A_n = 2A (tau/T) |sinc(n tau/T)| |sinc(n tr/T)|; A 1 V, T 1 us, tau 0.5 us, tr 10 ns:
    # A1 = 0.636515, A3 = 0.211893, A5 = 0.126801.
    A, T, tau, tr = 1.0, 1e-6, 0.5e-6, 10e-9
    s = trapezoid_pulse(A, tau, rise=tr, fall=tr, harmonics=200, fundamental_hz=1 / T)
    np.testing.assert_allclose(s.amplitude[[1, 3, 5]], [0.636515, 0.211893, 0.126801], rtol=0, atol=5e-7)
    n = np.arange(1, 201)
    paul = 2 * A * (tau / T) * np.abs(np.sinc(n * tau / T)) * np.abs(np.sinc(n * tr / T))
    np.testing.assert_allclose(s.amplitude[1:], paul, rtol=0, atol=1e-15)
    assert s.dc == pytest.approx(A * tau / T, rel=1e-15)


def test_trapezoid_envelope_corners_published_paul() -> None:
    # Paul sec. 3.2 [from memory]: f1 = 1/(pi tau) = 636.62 kHz, f2 = 1/(pi tr) = 31.831 MHz.
    f1, f2 = trapezoid_envelope_corners(0.5e-6, 10e-9)
    assert f1 == pytest.approx(1 / (PI * 0.5e-6), rel=1e-15)
    assert f2 == pytest.approx(1 / (PI * 10e-9), rel=1e-15)
    assert round(f1 / 1e3, 2) == 636.62
    assert round(f2 / 1e6, 3) == 31.831


def test_conduction_angle_for_drop_published_check() -> None:
    # REFERENCES.md drop check (Cripps / Krauss-Bostian-Raab formulas [from memory]):
    # Vm 10 V, Vd 0.7 V, R 1 kOhm: theta = 85.986 deg, alpha0 = 0.30547, Idc = 2.8409 mA.
    vm, vd, r = 10.0, 0.7, 1e3
    full = conduction_angle_for_drop(vm, vd)
    assert full == pytest.approx(2 * math.acos(vd / vm), rel=1e-15)
    assert math.degrees(full / 2) == pytest.approx(85.986, abs=5e-4)
    alpha0 = truncated_cosine_coefficients(full / 2, harmonics=1)[0]
    assert alpha0 == pytest.approx(0.30547, abs=5e-6)
    idc = truncated_cosine((vm - vd) / r, full, harmonics=1).dc
    assert idc == pytest.approx(2.8409e-3, abs=5e-8)
    assert conduction_angle_for_drop(vm, 0.0) == pytest.approx(PI, rel=1e-15)  # no drop: half-wave


# =========================================================================== facts of the trade
def test_half_wave_rectified_odd_and_even_harmonics() -> None:
    # common practice: no odd harmonics above the fundamental; even ones fall as 1/(n^2 - 1).
    A = 4.0
    s = half_wave_rectified(A, harmonics=40)
    np.testing.assert_allclose(s.amplitude[3::2], 0.0, atol=1e-15 * A)
    n = np.arange(2, 41, 2)
    np.testing.assert_allclose(s.amplitude[2::2] * (n**2 - 1), 2 * A / PI, rtol=1e-14)


def test_full_wave_rectified_twice_half_wave() -> None:
    # common practice: full wave has no fundamental, only even harmonics, each twice the half-wave's.
    for reference in ("cosine", "sine"):
        full = full_wave_rectified(3.0, harmonics=40, reference=reference)
        half = half_wave_rectified(3.0, harmonics=40, reference=reference)
        np.testing.assert_allclose(full.amplitude[1::2], 0.0, atol=1e-15 * 3)
        np.testing.assert_allclose(full.amplitude[2::2], 2 * half.amplitude[2::2], rtol=1e-15)
        assert full.dc == pytest.approx(2 * half.dc, rel=1e-15)


def test_pulse_train_harmonics_follow_sin_over_n() -> None:
    # common practice: every harmonic of a pulse train is proportional to |sin(n pi d)| / n.
    # |sin(n pi d)| is taken from mpmath so that the only rounding is simloop's (a near-zero
    # sin(n pi d) has a large relative error in any double evaluation, hence atol re the largest).
    A, d = 1.0, 0.37
    s = pulse_train(A, d, harmonics=60, delay=0.123)
    n = np.arange(1, 61)
    with mpmath.workdps(30):
        shape = np.array([float(abs(mpmath.sin(k * mpmath.pi * mpmath.mpf(d))) / k) for k in n])
    np.testing.assert_allclose(s.amplitude[1:], s.amplitude[1] / shape[0] * shape, rtol=0, atol=1e-15 * A)


def test_square_wave_no_even_harmonics() -> None:
    # common practice: a 50 % square wave has no even harmonics (any delay, either polarity).
    for bipolar in (False, True):
        s = square_wave(2.0, harmonics=50, delay=0.3, bipolar=bipolar)
        np.testing.assert_allclose(s.amplitude[2::2], 0.0, atol=1e-15 * 2)


def test_truncated_cosine_180_degrees_is_half_wave() -> None:
    # common practice: a truncated cosine with 180 deg full conduction angle is the half-wave.
    for reference in ("cosine", "sine"):
        tc = truncated_cosine(7.0, PI, harmonics=30, fundamental_hz=60.0, reference=reference)
        hw = half_wave_rectified(7.0, harmonics=30, fundamental_hz=60.0, reference=reference)
        np.testing.assert_allclose(tc.complex_amplitude, hw.complex_amplitude, rtol=0, atol=1e-14)
        assert tc.dc == pytest.approx(hw.dc, rel=1e-15)


def test_trapezoid_pulse_zero_edges_is_pulse_train() -> None:
    # Paul sec. 3.2 [from memory]: with tr = tf = 0 the trapezoid is the rectangular pulse train.
    tp = trapezoid_pulse(3.0, 0.2e-3, rise=0.0, fall=0.0, harmonics=100, fundamental_hz=1e3, delay=0.7e-3)
    pt = pulse_train(3.0, 0.2, harmonics=100, fundamental_hz=1e3, delay=0.7e-3)
    np.testing.assert_allclose(tp.complex_amplitude, pt.complex_amplitude, rtol=0, atol=1e-14)
    assert tp.dc == pytest.approx(pt.dc, rel=1e-14)


# =========================================================================== properties
def _case_strategy() -> st.SearchStrategy[Case]:
    amp = st.floats(0.1, 20.0)
    f0 = st.sampled_from([1.0, 50.0, 1e6])
    ref = st.sampled_from(["cosine", "sine"])
    frac = st.floats(0.02, 0.98)

    @st.composite
    def trapezoid(draw: st.DrawFn) -> Case:
        f = draw(f0)
        T = 1 / f
        width = draw(st.floats(0.05, 0.9)) * T
        room = min(width, T - width)  # (tr + tf)/2 must fit in both the width and the gap
        rise = draw(st.floats(0.0, 1.0)) * room
        fall = draw(st.floats(0.0, 1.0)) * room
        return _case_trapezoid(draw(amp), width, rise, fall, f, draw(frac) * T)

    return st.one_of(
        st.builds(_case_half_wave, amp, f0, ref),
        st.builds(_case_full_wave, amp, f0, ref),
        st.builds(lambda a, d, f, x: _case_pulse(a, d, f, x / f), amp, frac, f0, frac),
        st.builds(lambda a, f, x, bp: _case_square(a, f, x / f, bp), amp, f0, frac, st.booleans()),
        st.builds(_case_truncated_cosine, amp, st.floats(0.05, 2 * PI), f0, ref),
        trapezoid(),
    )


@settings(max_examples=60, deadline=None)
@given(case=_case_strategy())
def test_spectrum_rms_parseval_converges(case: Case) -> None:
    # Reference: quad of the squared definition (Parseval). The tail bound is common practice:
    # for total variation V per period |c_n| <= V/(2 pi n), so sum_{n>N} A_n^2/2 < V^2/(2 pi^2 N).
    mean_square = _quad_mean_square(case)
    orders = (4, 32, 256, 2048)
    partial = [_spectrum(case, n).rms ** 2 for n in orders]
    assert all(lo <= hi * (1 + 1e-14) for lo, hi in zip(partial[:-1], partial[1:]))
    for n, p in zip(orders, partial):
        gap = mean_square - p
        assert gap >= -1e-12 * mean_square
        assert gap <= case.variation**2 / (2 * PI**2 * n) + 1e-12 * mean_square


_DELAYABLE = st.sampled_from(["pulse", "square", "trapezoid"])


@settings(max_examples=60, deadline=None)
@given(kind=_DELAYABLE, delay=st.floats(-5.0, 5.0), f0=st.sampled_from([1.0, 1e3, 2.5e6]))
def test_ideal_spectrum_delay_changes_only_phases(kind: str, delay: float, f0: float) -> None:
    # common practice: time-shift property, f(t - tau) has C_n exp(-j n w0 tau); amplitudes unchanged.
    T = 1 / f0
    params = {
        "pulse": dict(amplitude=2.0, duty=0.3),
        "square": dict(amplitude=2.0, bipolar=True),
        "trapezoid": dict(amplitude=2.0, width=0.4 * T, rise=0.1 * T, fall=0.03 * T),
    }[kind]
    base = ideal_spectrum(kind, harmonics=N_CHECK, fundamental_hz=f0, **params)
    moved = ideal_spectrum(kind, harmonics=N_CHECK, fundamental_hz=f0, delay=delay * T, **params)
    np.testing.assert_allclose(moved.amplitude, base.amplitude, rtol=1e-13, atol=1e-15)
    n = np.arange(1, N_CHECK + 1)
    shift = 2 * PI * n * delay  # n w0 tau with tau = delay * T
    big = base.amplitude[1:] > 1e-9 * base.amplitude.max()
    wrapped = np.angle(np.exp(1j * (moved.phase_rad[1:] - base.phase_rad[1:] - shift)))
    np.testing.assert_allclose(wrapped[big], 0.0, atol=1e-11)


@settings(max_examples=40, deadline=None)
@given(duty=st.one_of(st.floats(max_value=0.0), st.floats(min_value=1.0), st.just(math.nan)))
def test_pulse_train_rejects_duty_outside_open_interval(duty: float) -> None:
    with pytest.raises(InputError, match="duty"):
        pulse_train(1.0, duty, harmonics=5)


@settings(max_examples=40, deadline=None)
@given(n=st.one_of(st.integers(max_value=0), st.integers(min_value=10_001)))
def test_half_wave_rectified_rejects_harmonics_out_of_range(n: int) -> None:
    with pytest.raises(InputError, match="harmonics"):
        half_wave_rectified(1.0, harmonics=n)


# =========================================================================== validation
BAD_INPUTS = [
    (half_wave_rectified, (-1.0,), dict(harmonics=5), "amplitude must be >= 0"),
    (half_wave_rectified, (math.inf,), dict(harmonics=5), "amplitude must be a finite"),
    (half_wave_rectified, (1.0,), dict(harmonics=2.5), "harmonics must be a whole number"),
    (half_wave_rectified, (1.0,), dict(harmonics=True), "harmonics must be a whole number"),
    (half_wave_rectified, (1.0,), dict(harmonics=5, fundamental_hz=0.0), "fundamental_hz must be a positive"),
    (half_wave_rectified, (1.0,), dict(harmonics=5, reference="tangent"), "reference must be one of"),
    (full_wave_rectified, ("ten",), dict(harmonics=5), "amplitude must be a number"),
    (pulse_train, (1.0, 1.0), dict(harmonics=5), "duty must lie strictly between 0 and 1"),
    (pulse_train, (1.0, 0.5), dict(harmonics=5, delay=math.nan), "delay must be a finite"),
    (square_wave, (1.0,), dict(harmonics=5, bipolar="yes"), "bipolar must be True or False"),
    (truncated_cosine, (1.0, 0.0), dict(harmonics=5), r"conduction_angle must be in \(0, 2\*pi\]"),
    (truncated_cosine, (1.0, 7.0), dict(harmonics=5), r"conduction_angle must be in \(0, 2\*pi\]"),
    (truncated_cosine, (-1.0, 1.0), dict(harmonics=5), "peak must be >= 0"),
    (truncated_cosine_coefficients, (3.2,), dict(harmonics=5), r"half_angle must be in \(0, pi\]"),
    (trapezoid_pulse, (1.0, 0.5), dict(rise=0.6, fall=0.6, harmonics=5), "rise \\+ fall .* twice the 50 % width"),
    (trapezoid_pulse, (1.0, 0.8), dict(rise=0.3, fall=0.3, harmonics=5), "too long for the period"),
    (trapezoid_pulse, (1.0, 1.0), dict(rise=0.0, fall=0.0, harmonics=5), "shorter than the period"),
    (trapezoid_pulse, (1.0, 0.5), dict(rise=-0.1, fall=0.0, harmonics=5), "rise must be >= 0"),
    (trapezoid_envelope_corners, (0.5e-6, 0.0), {}, "rise must be a positive"),
    (trapezoid_envelope_corners, (-1.0, 1e-9), {}, "width must be a positive"),
    (conduction_angle_for_drop, (10.0, 10.0), {}, "drop .* must be below the amplitude"),
    (conduction_angle_for_drop, (10.0, -0.7), {}, "drop must be >= 0"),
    (conduction_angle_for_drop, (0.0, 0.0), {}, "amplitude must be a positive"),
]


@pytest.mark.parametrize("func, args, kwargs, match", BAD_INPUTS,
                         ids=[f"{f.__name__}-{m[:24]}" for f, _, _, m in BAD_INPUTS])
def test_ideal_functions_reject_bad_input(func, args, kwargs, match) -> None:
    with pytest.raises(InputError, match=match) as info:
        func(*args, **kwargs)
    assert "\n" not in str(info.value)


def test_half_wave_rectified_harmonics_keyword_only_and_required() -> None:
    with pytest.raises(TypeError):
        half_wave_rectified(1.0, 5)  # type: ignore[misc]
    with pytest.raises(TypeError):
        half_wave_rectified(1.0)  # type: ignore[call-arg]


def test_ideal_spectrum_unknown_kind_lists_kinds() -> None:
    with pytest.raises(InputError, match="unknown waveform kind 'sawtooth'") as info:
        ideal_spectrum("sawtooth", amplitude=1.0, harmonics=3)  # type: ignore[arg-type]
    assert all(kind in str(info.value) for kind in WAVEFORM_KINDS)


def test_ideal_spectrum_unknown_parameter_names_accepted_ones() -> None:
    with pytest.raises(InputError, match="pulse: .*'duty_cycle'.*parameters are amplitude, duty,"):
        ideal_spectrum("pulse", amplitude=1.0, duty=0.5, duty_cycle=0.5, harmonics=3)
    with pytest.raises(InputError, match="trapezoid: missing .*'rise'"):
        ideal_spectrum("trapezoid", amplitude=1.0, width=0.5, fall=0.0, harmonics=3)


def test_ideal_waveform_rejects_bad_input() -> None:
    with pytest.raises(InputError, match="times t must all be finite"):
        ideal_waveform("pulse", [0.0, math.nan], amplitude=1.0, duty=0.5)
    with pytest.raises(InputError, match="harmonics"):
        ideal_waveform("pulse", [0.0], amplitude=1.0, duty=0.5, harmonics=0)
    with pytest.raises(InputError, match="unknown waveform kind"):
        ideal_waveform("triangle", [0.0], amplitude=1.0)  # type: ignore[arg-type]


# =========================================================================== dispatch and waveform
@pytest.mark.parametrize("case", QUAD_CASES, ids=lambda c: c.label)
def test_ideal_waveform_matches_definition(case: Case) -> None:
    # The plotted period must be the waveform defined in this file (away from the jumps).
    t = case.start + case.period * np.linspace(0.0, 1.0, 401, endpoint=False)[1:]
    near_jump = np.zeros(t.shape, dtype=bool)
    for b in case.breaks:
        near_jump |= np.abs(t - b) < 1e-9 * case.period
    want = np.array([case.f(x) for x in t])
    got = ideal_waveform(case.kind, t, harmonics=3, **case.params)
    scale = max(np.max(np.abs(want)), 1.0)
    np.testing.assert_allclose(got[~near_jump], want[~near_jump], rtol=0, atol=1e-9 * scale)


def test_ideal_spectrum_dispatches_to_named_functions() -> None:
    pairs = [
        ("half-wave", half_wave_rectified(2.0, harmonics=6, reference="sine"),
         dict(amplitude=2.0, reference="sine")),
        ("full-wave", full_wave_rectified(2.0, harmonics=6), dict(amplitude=2.0)),
        ("pulse", pulse_train(2.0, 0.2, harmonics=6, delay=0.1), dict(amplitude=2.0, duty=0.2, delay=0.1)),
        ("square", square_wave(2.0, harmonics=6, bipolar=True), dict(amplitude=2.0, bipolar=True)),
        ("truncated-cosine", truncated_cosine(2.0, 1.0, harmonics=6), dict(peak=2.0, conduction_angle=1.0)),
        ("trapezoid", trapezoid_pulse(2.0, 0.4, rise=0.1, fall=0.2, harmonics=6),
         dict(amplitude=2.0, width=0.4, rise=0.1, fall=0.2)),
    ]
    assert sorted(k for k, _, _ in pairs) == sorted(WAVEFORM_KINDS)
    for kind, direct, params in pairs:
        via = ideal_spectrum(kind, harmonics=6, **params)
        np.testing.assert_array_equal(via.amplitude, direct.amplitude)
        np.testing.assert_array_equal(via.phase_rad, direct.phase_rad)
