"""Spectrum object: magnitude-phase convention, synthesis, delay, Parseval."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from simloop.errors import InputError
from simloop.spectrum import Spectrum


def test_from_coefficients_magnitude_phase_convention():
    # f = a cos + b sin = A cos(wt - psi) with A = hypot(a, b), psi = atan2(b, a)
    # (trigonometric identity, common practice).
    s = Spectrum.from_coefficients(10.0, a=[0.0, 3.0, -1.0], b=[0.0, 4.0, 0.0])
    assert s.amplitude[1] == pytest.approx(5.0, rel=1e-15)
    assert s.phase_rad[1] == pytest.approx(math.atan2(4.0, 3.0), rel=1e-15)
    assert s.amplitude[2] == pytest.approx(1.0, rel=1e-15)
    assert s.phase_rad[2] == pytest.approx(math.pi, rel=1e-15)  # wrapped into (-pi, pi]


def test_evaluate_matches_direct_trig_sum():
    a = np.array([0.25, 1.0, -0.3, 0.05])
    b = np.array([0.0, 0.2, 0.1, -0.4])
    s = Spectrum.from_coefficients(50.0, a=a, b=b)
    t = np.linspace(0, 0.04, 97)
    w = 2 * np.pi * 50.0
    direct = a[0] + sum(a[n] * np.cos(n * w * t) + b[n] * np.sin(n * w * t) for n in (1, 2, 3))
    np.testing.assert_allclose(s.evaluate(t), direct, rtol=0, atol=1e-14)


@settings(max_examples=50, deadline=None)
@given(
    st.lists(st.floats(-2, 2), min_size=4, max_size=4),
    st.lists(st.floats(-2, 2), min_size=4, max_size=4),
    st.floats(-1e-3, 1e-3),
)
def test_delayed_is_time_shift(a, b, delay):
    s = Spectrum.from_coefficients(1000.0, a=[0.1, *a[1:]], b=[0.0, *b[1:]])
    t = np.linspace(0, 2e-3, 51)
    np.testing.assert_allclose(s.delayed(delay).evaluate(t), s.evaluate(t - delay), atol=1e-12)
    np.testing.assert_array_equal(s.delayed(delay).amplitude, s.amplitude)


def test_rms_parseval_against_numerical_mean_square():
    # Parseval's theorem for a trigonometric polynomial (common practice).
    s = Spectrum.from_coefficients(1.0, a=[0.5, 1.0, 0.0, 0.3], b=[0.0, 0.0, 0.7, 0.0])
    t = np.linspace(0, 1, 4096, endpoint=False)
    assert s.rms == pytest.approx(np.sqrt(np.mean(s.evaluate(t) ** 2)), rel=1e-13)


def test_coefficients_round_trip():
    a = [0.2, 0.3, -0.4]
    b = [0.0, 0.5, 0.6]
    ra, rb = Spectrum.from_coefficients(5.0, a=a, b=b).coefficients()
    np.testing.assert_allclose(ra, a, atol=1e-15)
    np.testing.assert_allclose(rb, b, atol=1e-15)


def test_spectrum_rejects_negative_harmonic_amplitude():
    with pytest.raises(InputError, match="must be >= 0"):
        Spectrum(50.0, [1.0, -0.5], [0.0, 0.0])


def test_spectrum_rejects_bad_frequency_and_shapes():
    with pytest.raises(InputError, match="positive number of hertz"):
        Spectrum(0.0, [1.0, 0.5], [0.0, 0.0])
    with pytest.raises(InputError, match="equal length"):
        Spectrum(1.0, [1.0, 0.5], [0.0])
    with pytest.raises(InputError, match="finite"):
        Spectrum(1.0, [1.0, float("nan")], [0.0, 0.0])


def test_tiny_components_get_zero_phase():
    s = Spectrum.from_complex(1.0, 1.0, [1.0, 1e-14 * np.exp(-1j)])
    assert s.phase_rad[2] == 0.0


def test_spectrum_is_immutable():
    s = Spectrum(1.0, [1.0, 0.5], [0.0, 0.1])
    with pytest.raises(ValueError):
        s.amplitude[0] = 3.0
