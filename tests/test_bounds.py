"""Page's 1/n^2 bound on harmonic generation by positive nonlinear resistors."""

from __future__ import annotations

import doctest
import json
import math

import mpmath
import numpy as np
import pytest
from scipy.optimize import brentq

from simloop import bounds
from simloop.bounds import (
    BOUND_NOTE,
    conversion_to_harmonics,
    element_output_power,
    page_bound,
)
from simloop.compare import harmonic_powers
from simloop.errors import InputError
from simloop.ideal import half_wave_rectified
from simloop.spectrum import Spectrum

# Invented bench doubler: 10 V peak at 1 kHz, an ideal diode in series with 1 kOhm.
V_PK = 10.0
R_OHM = 1e3
F0 = 1e3


def ideal_diode_into_r(harmonics: int) -> tuple[Spectrum, Spectrum, Spectrum]:
    """Diode current, diode voltage and load voltage of v_s = V cos wt -> ideal diode -> R.

    The current is the ideal half-wave i = (V/R) max(0, cos wt) (simloop.ideal); the diode
    voltage is v_s - R i (Kirchhoff), built coefficient by coefficient; the load voltage is R i.
    """
    current = half_wave_rectified(V_PK / R_OHM, harmonics=harmonics, fundamental_hz=F0)
    a, b = current.coefficients()
    a_d, b_d = -R_OHM * a, -R_OHM * b
    a_d[1] += V_PK  # the source V cos wt has only a fundamental
    diode_v = Spectrum.from_coefficients(F0, a=a_d, b=b_d)
    load_v = Spectrum.from_coefficients(F0, a=R_OHM * a, b=R_OHM * b)
    return current, diode_v, load_v


def test_page_bound_values():
    # Page, J. Res. NBS 56(4), 1956, RP2664 [confirmed]: efficiency of generating the n-th
    # harmonic <= 1/n^2: 0.25, 0.111, 0.0625 for n = 2, 3, 4.
    assert page_bound(1) == 1.0
    assert page_bound(2) == pytest.approx(0.25, rel=1e-15)
    assert page_bound(3) == pytest.approx(1 / 9, rel=1e-15)
    assert page_bound(4) == pytest.approx(0.0625, rel=1e-15)
    assert page_bound(np.int32(10)) == pytest.approx(0.01, rel=1e-15)


def test_conversion_to_harmonics_ideal_diode_doubler_is_16_over_9_pi_squared():
    # Derivation (v_s = V cos wt across an ideal diode in series with R):
    #   i = (V/R) max(0, cos wt), a half-wave rectified cosine. Its Fourier series (Spiegel,
    #   Schaum's Mathematical Handbook, Fourier series table [from memory]) gives
    #     I1 = V/(2R)  (in phase with the drive),   I2 = 2V/(3 pi R)  (a2 > 0).
    #   Diode voltage v_d = v_s - R i. At the fundamental V_d1 = V - R I1 = V/2, in phase with
    #   I1, so the power INTO THE DIODE at the fundamental is
    #     P_in1 = (1/2) V_d1 I1 = (1/2)(V/2)(V/(2R)) = V^2/(8R)
    #   (= the source's V^2/(4R) minus the V^2/(8R) that R dissipates at the fundamental).
    #   At 2w the source has no component, so V_d2 = -R I2: the diode gives out
    #     P_2 = (1/2) I2^2 R = (1/2)(2V/(3 pi R))^2 R = 2 V^2/(9 pi^2 R),
    #   all of it into R. Hence
    #     eta_2 = P_2 / P_in1 = (2 V^2/(9 pi^2 R)) / (V^2/(8R)) = 16/(9 pi^2) = 0.18013,
    #   below Page's 1/4 (Page, J. Res. NBS 56(4), 1956, RP2664 [confirmed]).
    # (Against the source's whole fundamental power V^2/(4R) the ratio would be 8/(9 pi^2);
    # Page's efficiency is taken against the power into the nonlinear element.)
    expected = 16.0 / (9.0 * math.pi**2)
    assert expected == pytest.approx(0.18013, abs=5e-6)
    current, diode_v, load_v = ideal_diode_into_r(harmonics=10)

    from_load = conversion_to_harmonics(
        element_voltage=diode_v,
        element_current=current,
        load_power_w=harmonic_powers(load_v, load_ohm=R_OHM),  # A_n^2 / (2R) at the load
    )
    from_element = conversion_to_harmonics(element_voltage=diode_v, element_current=current)
    for check in (from_load, from_element):
        assert check.input_power_w == pytest.approx(V_PK**2 / (8 * R_OHM), rel=1e-12)
        row2 = check.rows[0]
        assert row2.order == 2
        assert row2.output_power_w == pytest.approx(2 * V_PK**2 / (9 * math.pi**2 * R_OHM), rel=1e-12)
        assert row2.efficiency == pytest.approx(expected, abs=1e-12)
        assert row2.bound == 0.25 and not row2.exceeds
        assert not check.exceeds
    assert from_load.power_source == "given" and from_element.power_source == "element"


def test_conversion_to_harmonics_ideal_diode_every_order_below_page_bound():
    # Same circuit, orders 2..10. Half-wave series (Spiegel [from memory]): odd n >= 3 carry
    # no current, even n carry I_n = (2V/(pi R)) / (n^2 - 1), so
    #   eta_n = (1/2) I_n^2 R / (V^2/(8R)) = 16 / (pi^2 (n^2 - 1)^2)   (n even), 0 (n odd),
    # each below 1/n^2 (Page, J. Res. NBS 56(4), 1956, RP2664 [confirmed]).
    current, diode_v, load_v = ideal_diode_into_r(harmonics=10)
    check = conversion_to_harmonics(
        element_voltage=diode_v,
        element_current=current,
        load_power_w=harmonic_powers(load_v, load_ohm=R_OHM),
    )
    assert [r.order for r in check.rows] == list(range(2, 11))
    for r in check.rows:
        n = r.order
        if n % 2:
            assert r.efficiency == pytest.approx(0.0, abs=1e-15)
        else:
            assert r.efficiency == pytest.approx(16 / (math.pi**2 * (n * n - 1) ** 2), rel=1e-12)
        assert r.efficiency <= 1 / n**2
        assert r.bound == pytest.approx(1 / n**2, rel=1e-15)
        assert not r.exceeds


def test_element_output_power_ideal_diode_meets_page_relation_with_equality():
    # First principles: for the ideal diode v_d(t) i(t) = 0 and v_d'(t) i'(t) = 0 at every
    # instant (one of the two is constant in each state). The mean of v_d i is sum_n P_n (power
    # absorbed at each order, Parseval), and the mean of v_d' i' is w^2 sum_n n^2 P_n, so both
    # sums vanish: Page's relation sum n^2 P_n >= 0 (Page, J. Res. NBS 56(4), 1956, RP2664
    # [confirmed]) holds here with equality. Truncated at N, the partial sums equal minus the
    # tails over even n > N, I_n = (2V/(pi R))/(n^2 - 1), summed with mpmath.nsum.
    big_n = 200
    current, diode_v, _ = ideal_diode_into_r(harmonics=big_n)
    absorbed = np.array([-element_output_power(diode_v, current, n) for n in range(big_n + 1)])
    k0 = big_n // 2 + 1  # first even order above N is 2 k0

    scale = 0.5 * R_OHM * (2 * V_PK / (math.pi * R_OHM)) ** 2
    tail = scale * float(mpmath.nsum(lambda k: 1 / (4 * k**2 - 1) ** 2, [k0, mpmath.inf]))
    tail_n2 = scale * float(mpmath.nsum(lambda k: 4 * k**2 / (4 * k**2 - 1) ** 2, [k0, mpmath.inf]))
    n = np.arange(big_n + 1)
    assert float(np.sum(absorbed)) == pytest.approx(tail, rel=1e-9)
    assert float(np.sum(n**2 * absorbed)) == pytest.approx(tail_n2, rel=1e-9)
    # DC: V0 = -V/pi across the diode, I0 = V/(pi R): the diode gives out V^2/(pi^2 R) at DC
    assert absorbed[0] == pytest.approx(-(V_PK**2) / (math.pi**2 * R_OHM), rel=1e-12)


def test_conversion_to_harmonics_shockley_diode_below_page_bound():
    # A smooth positive resistor: Shockley diode i = Is (exp(v/(N Vt)) - 1) in series with
    # 100 Ohm, 2 V peak drive; the loop equation is solved for the diode voltage point by
    # point with brentq
    # (first principles, no simloop code), the period sampled at 4096 points and transformed
    # by numpy's FFT (spectrally accurate for a smooth periodic waveform). Page's bound must
    # hold at every order and sum n^2 P_n >= 0 (Page, J. Res. NBS 56(4), 1956, RP2664
    # [confirmed]). Is = 1e-14 A, N = 1 are the SPICE defaults (ngspice manual [confirmed]).
    i_s, vt, r, v_pk, f0 = 1e-14, 0.025852, 100.0, 2.0, 1e3
    m = 4096
    vs = v_pk * np.cos(2 * np.pi * np.arange(m) / m)

    def loop(vd, v):  # KVL: drive = diode voltage + R * Shockley current
        return v - vd - r * i_s * math.expm1(vd / vt)

    # the root lies between 0 and the drive (loop(0) = v, loop(v) has the opposite sign)
    vd = np.array([brentq(loop, min(v, 0.0), max(v, 0.0), args=(v,), xtol=1e-15, rtol=1e-14)
                   if v != 0.0 else 0.0 for v in vs])
    i = i_s * np.expm1(vd / vt)

    def spectrum(x, harmonics=40):
        c = np.fft.rfft(x) / m
        return Spectrum.from_complex(f0, c[0].real, 2 * c[1 : harmonics + 1])

    current, diode_v = spectrum(i), spectrum(vd)
    check = conversion_to_harmonics(element_voltage=diode_v, element_current=current)
    assert not check.exceeds
    assert all(0 <= r_.efficiency <= page_bound(r_.order) for r_ in check.rows)
    absorbed = [-element_output_power(diode_v, current, n) for n in range(1, 41)]
    assert sum(n * n * p for n, p in enumerate(absorbed, start=1)) >= 0


def test_conversion_to_harmonics_flags_reactive_multiplier_beyond_page():
    # Manley & Rowe, Proc. IRE 44, 1956, pp. 904-913 [confirmed]: a lossless nonlinear
    # reactance may convert all its fundamental power to a harmonic, so Page's bound (positive
    # resistors only) does not apply. Synthetic varactor doubler: 1 W in at the fundamental
    # (2 V, 1 A peak in phase), 0.9 W out at 2w (1.8 V, 1 A peak in antiphase): eta2 = 0.9,
    # which conversion_to_harmonics must flag as beyond 1/4.
    v = Spectrum(2e9, [0.0, 2.0, 1.8], [0.0, 0.0, math.pi])
    i = Spectrum(2e9, [0.0, 1.0, 1.0], [0.0, 0.0, 0.0])
    check = conversion_to_harmonics(element_voltage=v, element_current=i)
    assert check.input_power_w == pytest.approx(1.0, rel=1e-15)
    assert check.rows[0].efficiency == pytest.approx(0.9, rel=1e-15)
    assert check.rows[0].exceeds and check.exceeds
    assert "positive nonlinear resistors" in check.note and "Manley-Rowe" in check.note


def test_conversion_to_harmonics_rtol_absorbs_noise_only():
    # A circuit at the bound within numerical noise must not flag; a real excess must.
    v = Spectrum(1e6, [0.0, 2.0, 1.0], [0.0, 0.0, math.pi])
    i = Spectrum(1e6, [0.0, 1.0, 0.0], [0.0, 0.0, 0.0])  # P_in1 = 1 W

    def eta2_flag(eta: float, **kw) -> bool:
        load = [0.0, 0.0, eta * 1.0]
        return conversion_to_harmonics(
            element_voltage=v, element_current=i, load_power_w=load, **kw
        ).rows[0].exceeds

    assert not eta2_flag(0.25 * (1 + 1e-9))
    assert eta2_flag(0.25 * 1.01)
    assert eta2_flag(0.25 * (1 + 1e-9), rtol=0.0)
    assert not eta2_flag(0.25 * 1.01, rtol=0.02)


def test_conversion_to_harmonics_to_dict_is_json():
    current, diode_v, _ = ideal_diode_into_r(harmonics=4)
    data = json.loads(
        json.dumps(
            conversion_to_harmonics(element_voltage=diode_v, element_current=current).to_dict(),
            allow_nan=False,
        )
    )
    assert data["note"] == BOUND_NOTE
    assert data["fundamental_input_power_w"] == pytest.approx(V_PK**2 / (8 * R_OHM), rel=1e-12)
    assert set(data["orders"][0]) == {"order", "output_power_w", "efficiency", "page_bound", "exceeds"}
    assert data["orders"][0]["efficiency"] == pytest.approx(16 / (9 * math.pi**2), rel=1e-12)


@pytest.mark.parametrize(
    ("call", "match"),
    [
        (lambda: page_bound(0), "order"),
        (lambda: page_bound(2.0), "integer"),
        (lambda: page_bound(True), "integer"),
    ],
)
def test_page_bound_bad_input_one_line(call, match):
    with pytest.raises(InputError, match=match) as exc:
        call()
    assert "\n" not in str(exc.value)


def test_conversion_to_harmonics_bad_input_one_line():
    current, diode_v, _ = ideal_diode_into_r(harmonics=4)
    backwards = Spectrum(F0, current.amplitude, current.phase_rad + math.pi)  # current reversed
    cases = [
        (dict(element_voltage=diode_v, element_current=backwards), "passive sign convention"),
        (
            dict(element_voltage=diode_v, element_current=Spectrum(2 * F0, [0, 1, 1], [0, 0, 0])),
            "same fundamental",
        ),
        (dict(element_voltage=diode_v, element_current=current, load_power_w=[0.0, 1.0]), "N >= 2"),
        (dict(element_voltage=diode_v, element_current=current, load_power_w=[[0.0] * 3]), "1-D"),
        (
            dict(element_voltage=diode_v, element_current=current, load_power_w=[0, 0, math.nan]),
            "finite",
        ),
        (dict(element_voltage=diode_v, element_current=current, load_power_w=["x", 0, 0]), "numbers"),
        (dict(element_voltage=diode_v, element_current=current, rtol=-1e-6), "rtol"),
        (
            dict(
                element_voltage=Spectrum(F0, [0, 1], [0, 0]),
                element_current=Spectrum(F0, [0, 1], [0, 0]),
            ),
            "no harmonic",
        ),
    ]
    for kwargs, match in cases:
        with pytest.raises(InputError, match=match) as exc:
            conversion_to_harmonics(**kwargs)
        assert "\n" not in str(exc.value)
    with pytest.raises(InputError, match="orders 0..4") as exc:
        element_output_power(diode_v, current, 5)
    assert "\n" not in str(exc.value)
    with pytest.raises(InputError, match="order") as exc:
        element_output_power(diode_v, current, -1)


def test_bounds_doctests():
    result = doctest.testmod(bounds, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0 and result.failed == 0
