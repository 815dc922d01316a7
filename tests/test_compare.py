"""Comparison rows, conduction angle, harmonic powers."""

from __future__ import annotations

import math

import numpy as np
import pytest

from simloop.compare import (
    compare_spectra,
    conduction_angle_deg,
    conversion_efficiency,
    harmonic_powers,
)
from simloop.errors import InputError
from simloop.spectrum import Spectrum


def test_compare_spectra_delta_db_and_absent_harmonics():
    ideal = Spectrum(50.0, [1.0, 0.5, 0.0, 0.1], [0, 0, 0, 0])
    sim = Spectrum(50.0, [0.9, 0.4, 0.01, 0.1], [0, 0.1, 0, 0])
    rows = compare_spectra(sim, ideal=ideal)
    assert [r.n for r in rows] == [0, 1, 2, 3]
    assert rows[1].delta_db == pytest.approx(20 * math.log10(0.4 / 0.5), rel=1e-12)
    assert rows[2].delta_db is None  # ideal zero: no ratio
    assert rows[3].delta_db == pytest.approx(0.0, abs=1e-12)
    assert rows[1].sim_phase_deg == pytest.approx(math.degrees(0.1), rel=1e-12)
    assert rows[3].freq_hz == 150.0


def test_compare_spectra_without_ideal_leaves_columns_empty():
    sim = Spectrum(50.0, [0.9, 0.4], [0, 0])
    (row0, row1) = compare_spectra(sim, ideal=None)
    assert row1.ideal_v is None and row1.delta_db is None and row1.sim_v == 0.4


def test_compare_spectra_rejects_other_fundamental():
    with pytest.raises(InputError, match="fundamental"):
        compare_spectra(Spectrum(50.0, [1, 1], [0, 0]), ideal=Spectrum(60.0, [1, 1], [0, 0]))


def test_conduction_angle_of_truncated_cosine_current():
    # i = cos(wt) - cos(theta) while positive: conducting where it exceeds 1e-3 of its peak,
    # i.e. |wt| < arccos(cos theta + 1e-3 (1 - cos theta)) (first principles).
    theta = math.radians(70.0)
    rng = np.random.default_rng(3)
    t = np.sort(np.concatenate(([0.0, 2.0], rng.uniform(0, 2.0, 40000))))
    w = 2 * math.pi
    i = np.maximum(np.cos(w * t) - math.cos(theta), 0.0)
    expected = 2 * math.degrees(math.acos(math.cos(theta) + 1e-3 * (1 - math.cos(theta))))
    assert conduction_angle_deg(t, i, fundamental_hz=1.0) == pytest.approx(expected, abs=0.02)


def test_harmonic_powers_and_efficiency():
    # P = V^2 / R for DC and A^2 / (2 R) for a sinusoid of peak A (common practice).
    s = Spectrum(50.0, [2.0, 4.0], [0, 0])
    np.testing.assert_allclose(harmonic_powers(s, load_ohm=8.0), [0.5, 1.0])
    np.testing.assert_allclose(conversion_efficiency(s, load_ohm=8.0, source_power_w=2.0), [0.25, 0.5])
    with pytest.raises(InputError):
        harmonic_powers(s, load_ohm=0.0)
