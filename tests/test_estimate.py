"""Drop-corrected estimates against published check values and first principles."""

from __future__ import annotations

import math

import numpy as np
import pytest

from simloop.errors import InputError
from simloop.estimate import (
    junction_drop,
    operating_drop,
    reservoir_rectifier,
    resistive_rectifier,
    thermal_voltage,
)


def test_thermal_voltage_at_spice_nominal_temperature():
    # kT/q at 300.15 K with the exact SI constants (CODATA 2018): 25.8649 mV.
    assert thermal_voltage(27.0) == pytest.approx(1.380649e-23 * 300.15 / 1.602176634e-19, rel=1e-15)
    assert thermal_voltage(27.0) == pytest.approx(0.0258649, rel=1e-5)


def test_junction_drop_inverts_shockley_equation():
    # I = IS (exp(V / (N Vt)) - 1), Shockley 1949 [from memory].
    v = junction_drop(0.1, saturation_current=1e-9, emission=1.8)
    assert 1e-9 * math.expm1(v / (1.8 * thermal_voltage())) == pytest.approx(0.1, rel=1e-12)


def test_resistive_rectifier_published_drop_case():
    # REFERENCES check case: Vm 10 V, Vd 0.7 V, R 1 kOhm: theta = 85.986 deg, alpha0 = 0.30547,
    # Idc = 2.8409 mA (Cripps, RF Power Amplifiers, ch. 3 [from memory]). Load voltage = R * I.
    spec = resistive_rectifier(10.0, 0.7, resistance=1e3, load=1e3, harmonics=4,
                               fundamental_hz=50.0, reference="cosine")
    assert spec.dc == pytest.approx(2.8409, abs=5e-5)


def test_resistive_rectifier_no_drop_is_half_wave():
    # With V_d = 0 the current is a half sine: DC = A/pi, A1 = A/2, A2 = 2A/(3 pi)
    # (Spiegel, Schaum's Mathematical Handbook, Fourier series table [from memory]).
    spec = resistive_rectifier(10.0, 0.0, resistance=100.0, load=100.0, harmonics=4,
                               fundamental_hz=50.0, reference="cosine")
    np.testing.assert_allclose(spec.amplitude[:3], [10 / math.pi, 5.0, 20 / (3 * math.pi)],
                               rtol=1e-12)
    assert spec.amplitude[3] == pytest.approx(0.0, abs=1e-12)


def test_resistive_rectifier_full_wave_doubles_even_cancels_odd():
    # Common practice: a full-wave rectifier's spectrum is the half-wave's even harmonics doubled
    # and no odd ones.
    half = resistive_rectifier(10.0, 1.0, resistance=100.0, load=100.0, harmonics=6,
                               fundamental_hz=50.0)
    full = resistive_rectifier(10.0, 1.0, resistance=100.0, load=100.0, harmonics=6,
                               fundamental_hz=50.0, full_wave=True)
    np.testing.assert_allclose(full.amplitude[0::2], 2 * half.amplitude[0::2], rtol=1e-12)
    np.testing.assert_allclose(full.amplitude[1::2], 0.0, atol=1e-12)


def test_operating_drop_self_consistent():
    drop, peak = operating_drop(12.0, resistance=100.0, saturation_current=1e-8, emission=1.85)
    assert peak == pytest.approx((12.0 - drop) / 100.0, rel=1e-12)
    assert drop == pytest.approx(junction_drop(peak, saturation_current=1e-8, emission=1.85), rel=1e-9)


def test_operating_drop_rejects_zero_resistance():
    with pytest.raises(InputError, match="positive series resistance"):
        operating_drop(1.0, resistance=0.0, saturation_current=1e-14, emission=1.0)


def test_reservoir_rectifier_ripple_near_peak_detector_formula():
    # Large omega R C: ripple Vr ~ Vp / (f R C) with Vp the peak output (Sedra & Smith,
    # Microelectronic Circuits 7th ed., sec. 4.5 [from memory]); good to ~5-10 % here.
    f, rl, c = 50.0, 1e3, 1e-3  # omega R C = 314
    spec, peak_current = reservoir_rectifier(12.0, 0.7, source_resistance=0.5, load=rl,
                                             capacitance=c, harmonics=20, fundamental_hz=f)
    t = np.linspace(0, 1 / f, 20001)
    v = spec.evaluate(t)
    vp = v.max()
    ripple = v.max() - v.min()
    assert ripple == pytest.approx(vp / (f * rl * c), rel=0.12)
    assert spec.dc == pytest.approx(vp - ripple / 2, rel=0.01)
    assert peak_current > 10 * spec.dc / rl  # short conduction: peak far above the load current


def test_reservoir_rectifier_small_capacitor_approaches_resistive():
    # omega tau << 1 (tau = C Rs||RL = T/2000): the capacitor barely filters, and the resistive
    # closed form holds to about omega tau = 3e-3 of the largest component (first principles).
    spec, _ = reservoir_rectifier(10.0, 0.7, source_resistance=100.0, load=100.0,
                                  capacitance=2e-7, harmonics=4, fundamental_hz=50.0,
                                  reference="cosine")
    ref = resistive_rectifier(10.0, 0.7, resistance=200.0, load=100.0, harmonics=4,
                              fundamental_hz=50.0, reference="cosine")
    np.testing.assert_allclose(spec.amplitude, ref.amplitude, atol=4e-3 * ref.amplitude.max())
    assert not np.allclose(spec.amplitude, ref.amplitude, atol=1e-6 * ref.amplitude.max())
