"""IEC 61000-3-2 Class A / Class D limits, line-current verdicts, power factor."""

from __future__ import annotations

import doctest
import json
import math

import numpy as np
import pytest
from scipy.integrate import quad

from simloop import mains
from simloop.errors import InputError
from simloop.mains import (
    SOURCE_NOTE,
    active_power,
    class_a_limit,
    class_d_limit,
    displacement_factor,
    line_current_check,
    power_factor,
)
from simloop.spectrum import Spectrum

# The limit tables as printed in /work/shared/REFERENCES.md, transcribed independently of
# simloop/mains.py. Source: IEC 61000-3-2 as reproduced in secondary sources [from memory].
CLASS_A_TABLE_A = {3: 2.30, 5: 1.14, 7: 0.77, 9: 0.40, 11: 0.33, 13: 0.21, 2: 1.08, 4: 0.43, 6: 0.30}
CLASS_D_TABLE_MA_PER_W = {3: 3.4, 5: 1.9, 7: 1.0, 9: 0.5, 11: 0.35}


def table_class_a(n: int) -> float:
    """Class A [A rms] from the printed table (IEC 61000-3-2, secondary sources [from memory])."""
    if n in CLASS_A_TABLE_A:
        return CLASS_A_TABLE_A[n]
    return 0.15 * 15 / n if n % 2 else 0.23 * 8 / n


def table_class_d(n: int, power_w: float) -> float:
    """Class D [A rms]: per-watt value times P, capped at Class A (same source [from memory])."""
    per_w = CLASS_D_TABLE_MA_PER_W.get(n, 3.85 / n) * 1e-3
    return min(per_w * power_w, table_class_a(n))


def mains_sine(v_rms: float = 230.0, f0: float = 50.0) -> Spectrum:
    return Spectrum(f0, [0.0, v_rms * math.sqrt(2.0)], [0.0, 0.0])


def line_current(peaks: dict[int, float], *, phases: dict[int, float] | None = None) -> Spectrum:
    amp = np.zeros(41)
    ph = np.zeros(41)
    for n, a in peaks.items():
        amp[n] = a
    for n, p in (phases or {}).items():
        ph[n] = p
    return Spectrum(50.0, amp, ph)


def assert_one_line(exc: pytest.ExceptionInfo) -> None:
    text = str(exc.value)
    assert text and "\n" not in text


# --------------------------------------------------------------------------- limit tables
def test_class_d_limit_published_check_values_at_100_w():
    # IEC 61000-3-2 as reproduced in secondary sources [from memory]: Class D at 100 W gives
    # I3 = 3.4 mA/W x 100 W = 0.340 A and I13 = 3.85/13 mA/W x 100 W = 0.02962 A.
    assert class_d_limit(3, power_w=100.0) == pytest.approx(0.340, rel=1e-12)
    assert class_d_limit(13, power_w=100.0) == pytest.approx(3.85 / 13 * 0.1, rel=1e-12)
    assert class_d_limit(13, power_w=100.0) == pytest.approx(0.02962, abs=5e-6)  # printed, 4 s.f.


def test_class_a_limit_published_check_value_order_21():
    # IEC 61000-3-2 as reproduced in secondary sources [from memory]: Class A, 15 <= n <= 39
    # odd: 0.15 x 15 / n; n = 21 gives 0.10714 A, printed as 0.107 A.
    assert class_a_limit(21) == pytest.approx(0.15 * 15 / 21, rel=1e-12)
    assert class_a_limit(21) == pytest.approx(0.107, abs=5e-4)


def test_class_a_limit_whole_table():
    # Every order 2..40 against the transcribed table (IEC 61000-3-2, secondary sources
    # [from memory]); the fundamental and orders above 40 carry no limit.
    for n in range(2, 41):
        assert class_a_limit(n) == pytest.approx(table_class_a(n), rel=1e-12), n
    assert class_a_limit(1) is None
    assert class_a_limit(41) is None
    assert class_a_limit(np.int64(8)) == pytest.approx(0.23, rel=1e-12)


def test_class_d_limit_never_above_class_a_at_600_w():
    # IEC 61000-3-2, secondary sources [from memory]: Class D limits are never above Class A.
    # At 600 W the per-watt rule gives 0.6 x 3.85/n = 2.31/n A for n >= 13, above Class A's
    # 2.25/n from n = 15 on, so the cap must bind there.
    for n in range(3, 40, 2):
        d = class_d_limit(n, power_w=600.0)
        assert d <= class_a_limit(n), n
        assert d == pytest.approx(table_class_d(n, 600.0), rel=1e-12), n
    for n in range(15, 40, 2):
        assert class_d_limit(n, power_w=600.0) == pytest.approx(0.15 * 15 / n, rel=1e-12)
    assert class_d_limit(13, power_w=600.0) == pytest.approx(3.85 / 13 * 0.6, rel=1e-12)


def test_class_d_limit_even_and_fundamental_orders_have_none():
    # Class D lists odd orders only (IEC 61000-3-2, secondary sources [from memory]).
    for n in (1, 2, 4, 10, 40, 41):
        assert class_d_limit(n, power_w=200.0) is None


def test_class_d_limit_power_outside_range_refused():
    # The per-watt values are given for 75 W < P <= 600 W (same source [from memory]).
    assert class_d_limit(3, power_w=600.0) == pytest.approx(3.4e-3 * 600.0, rel=1e-12)
    for p in (75.0, 10.0, 600.5, 2000.0):
        with pytest.raises(InputError, match=r"75 W < P <= 600 W") as exc:
            class_d_limit(3, power_w=p)
        assert_one_line(exc)
        assert "secondary sources" in str(exc.value)


@pytest.mark.parametrize(
    ("call", "match"),
    [
        (lambda: class_a_limit(0), "order"),
        (lambda: class_a_limit(-3), "order"),
        (lambda: class_a_limit(2.5), "integer"),
        (lambda: class_a_limit(True), "integer"),
        (lambda: class_d_limit(0, power_w=100.0), "order"),
        (lambda: class_d_limit(3, power_w=-100.0), "watts"),
        (lambda: class_d_limit(3, power_w=math.nan), "watts"),
        (lambda: class_d_limit(3, power_w="lots"), "watts"),
    ],
)
def test_class_limits_bad_input_one_line(call, match):
    with pytest.raises(InputError, match=match) as exc:
        call()
    assert_one_line(exc)


# --------------------------------------------------------------------------- power quantities
def test_active_power_matches_quadrature_of_v_times_i():
    # Mean of v(t) i(t) over one period by scipy.integrate.quad (reference library).
    f0 = 50.0
    v = Spectrum(f0, [1.5, 325.0, 0.0, 9.0, 0.0, 4.0], [0.0, 0.1, 0.0, -1.0, 0.0, 2.0])
    i = Spectrum(f0, [0.02, 0.6, 0.1, 0.3, 0.05], [0.0, 0.5, 0.2, 2.5, -0.7])
    t_period = 1.0 / f0
    mean, _ = quad(
        lambda t: float(v.evaluate(t) * i.evaluate(t)), 0.0, t_period, limit=200, epsabs=1e-12
    )
    assert active_power(v, i) == pytest.approx(mean / t_period, rel=1e-9)


def test_power_factor_pure_sine_in_phase_is_one():
    # A sinusoidal current in phase with a sinusoidal voltage has unit power factor
    # (common practice).
    i = line_current({1: 0.62})
    assert power_factor(mains_sine(), i) == pytest.approx(1.0, rel=1e-12)
    assert displacement_factor(mains_sine(), i) == pytest.approx(1.0, rel=1e-12)


def test_power_factor_with_harmonics_is_one_over_sqrt_one_plus_thd_squared():
    # Sinusoidal voltage, fundamental current in phase, harmonic currents: the power factor is
    # the distortion factor 1/sqrt(1 + THD^2), THD = sqrt(sum_{n>=2} I_n^2) / I_1
    # (common practice).
    peaks = {1: 0.9, 3: 0.7, 5: 0.45, 7: 0.2, 9: 0.08}
    i = line_current(peaks, phases={3: 2.0, 5: -1.0, 7: 0.4, 9: 3.0})
    thd = math.sqrt(sum(a * a for n, a in peaks.items() if n > 1)) / peaks[1]
    assert power_factor(mains_sine(), i) == pytest.approx(1 / math.sqrt(1 + thd**2), rel=1e-12)
    assert displacement_factor(mains_sine(), i) == pytest.approx(1.0, rel=1e-12)


def test_displacement_factor_shifted_fundamental_is_cos_phi():
    # A fundamental current lagging by phi: displacement factor cos(phi); with harmonics the
    # power factor is cos(phi) / sqrt(1 + THD^2) (common practice).
    phi = math.radians(35.0)
    peaks = {1: 0.9, 3: 0.5, 5: 0.3}
    i = line_current(peaks, phases={1: phi, 3: 1.0, 5: -2.0})
    thd = math.hypot(0.5, 0.3) / 0.9
    assert displacement_factor(mains_sine(), i) == pytest.approx(math.cos(phi), rel=1e-12)
    assert power_factor(mains_sine(), i) == pytest.approx(
        math.cos(phi) / math.sqrt(1 + thd**2), rel=1e-12
    )
    # a leading current gives the same factor
    lead = line_current({1: 0.9}, phases={1: -phi})
    assert displacement_factor(mains_sine(), lead) == pytest.approx(math.cos(phi), rel=1e-12)


def test_power_factor_zero_current_refused():
    with pytest.raises(InputError, match="non-zero") as exc:
        power_factor(mains_sine(), line_current({}))
    assert_one_line(exc)
    with pytest.raises(InputError, match="non-zero") as exc:
        displacement_factor(mains_sine(), line_current({3: 0.1}))
    assert_one_line(exc)


# --------------------------------------------------------------------------- verdicts
def test_line_current_check_invented_spectrum_passes_class_a():
    # Invented: a 230 V, 50 Hz, 300 W power-supply front end with a passive PFC choke.
    # Current peaks [A] at orders 1, 3, 5, 7, 9, 11, 13, 21 and a small 2nd harmonic.
    peaks = {1: 1.85, 2: 0.05, 3: 1.2, 5: 0.6, 7: 0.3, 9: 0.2, 11: 0.12, 13: 0.1, 21: 0.06}
    verdict = line_current_check(line_current(peaks), supply_voltage=None, limit_class="A")
    assert verdict.passed and verdict.failures() == ()
    assert [r.order for r in verdict.rows] == list(range(2, 41))
    ratios = {}
    for r in verdict.rows:
        i_rms = peaks.get(r.order, 0.0) / math.sqrt(2)  # limits are rms (common practice)
        limit = table_class_a(r.order)
        assert r.current_a_rms == pytest.approx(i_rms, rel=1e-12)
        assert r.limit_a_rms == pytest.approx(limit, rel=1e-12)
        assert r.margin_a == pytest.approx(limit - i_rms, rel=1e-12)
        if i_rms > 0:
            assert r.margin_db == pytest.approx(20 * math.log10(limit / i_rms), rel=1e-12)
            ratios[r.order] = i_rms / limit
        else:
            assert r.margin_db is None
        assert r.passed
    assert verdict.worst_order == max(ratios, key=ratios.get)
    assert verdict.power_factor is None and verdict.active_power_w is None
    assert verdict.source_note == SOURCE_NOTE


def test_line_current_check_invented_spectrum_fails_class_d():
    # Invented: a 230 V, 50 Hz, 120 W bench supply front end (bridge and reservoir capacitor, no
    # PFC). The 5th and 7th harmonics are over the Class D limits, the 3rd is under.
    peaks = {1: 0.74, 3: 0.55, 5: 0.36, 7: 0.22, 9: 0.06, 11: 0.04}
    verdict = line_current_check(
        line_current(peaks), supply_voltage=None, limit_class="D", power_w=120.0
    )
    assert not verdict.passed
    assert verdict.power_w == 120.0 and not verdict.power_from_spectra
    failing = {r.order for r in verdict.failures()}
    expected_failing = set()
    for r in verdict.rows:
        i_rms = peaks.get(r.order, 0.0) / math.sqrt(2)
        assert r.current_a_rms == pytest.approx(i_rms, rel=1e-12)
        if r.order % 2 == 0:
            # Class D lists odd orders only (IEC 61000-3-2, secondary sources [from memory])
            assert r.limit_a_rms is None and r.margin_a is None and r.passed
            continue
        limit = table_class_d(r.order, 120.0)
        assert r.limit_a_rms == pytest.approx(limit, rel=1e-12)
        assert r.margin_a == pytest.approx(limit - i_rms, rel=1e-12)
        if i_rms > limit:
            expected_failing.add(r.order)
            assert r.margin_db < 0
    assert failing == expected_failing == {5, 7}
    row5 = verdict.rows[3]
    assert row5.order == 5
    assert row5.margin_a == pytest.approx(1.9e-3 * 120 - 0.36 / math.sqrt(2), rel=1e-12)


def test_line_current_check_class_d_power_from_spectra():
    # Class D scaled by the active power P = sum V_n I_n cos(psi_v - psi_i) / 2 of the two
    # spectra, checked here by quadrature of v(t) i(t) (scipy.integrate.quad).
    phi = math.radians(20.0)
    v = Spectrum(50.0, [0.0, 325.0, 0.0, 6.0], [0.0, 0.0, 0.0, 0.3])
    i = line_current({1: 1.2, 3: 0.8, 5: 0.4, 7: 0.1}, phases={1: phi, 3: 0.9})
    mean, _ = quad(lambda t: float(v.evaluate(t) * i.evaluate(t)), 0.0, 0.02, limit=200)
    p_ref = mean / 0.02
    verdict = line_current_check(i, supply_voltage=v, limit_class="D")
    assert verdict.power_from_spectra
    assert verdict.power_w == pytest.approx(p_ref, rel=1e-9)
    assert verdict.active_power_w == pytest.approx(p_ref, rel=1e-9)
    assert verdict.rows[1].limit_a_rms == pytest.approx(table_class_d(3, p_ref), rel=1e-9)
    assert verdict.displacement_factor == pytest.approx(math.cos(phi), rel=1e-12)
    assert verdict.power_factor == pytest.approx(p_ref / (v.rms * i.rms), rel=1e-9)


def test_line_current_check_to_dict_is_json_with_units_and_source_note():
    peaks = {1: 0.74, 3: 0.55, 5: 0.36}
    verdict = line_current_check(line_current(peaks), supply_voltage=mains_sine(), limit_class="D")
    data = json.loads(json.dumps(verdict.to_dict(), allow_nan=False))
    assert data["source_note"] == SOURCE_NOTE
    assert "from memory" in data["source_note"]
    assert data["limit_class"] == "D" and data["passed"] is verdict.passed
    row3 = data["orders"][1]
    assert set(row3) == {"order", "current_a_rms", "limit_a_rms", "margin_a", "margin_db", "passed"}
    assert row3["order"] == 3
    assert row3["current_a_rms"] == pytest.approx(0.55 / math.sqrt(2), rel=1e-12)


def test_line_current_check_max_order_limits_the_rows():
    i = Spectrum(50.0, [0.0, 1.0, 0.0, 0.5, 0.0, 0.2], np.zeros(6))
    verdict = line_current_check(i, supply_voltage=None, limit_class="A", max_order=5)
    assert [r.order for r in verdict.rows] == [2, 3, 4, 5]


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        (dict(limit_class="B"), "limit class"),
        (dict(limit_class="D", power_w=-100.0), "watts"),
        (dict(limit_class="D"), "power_w or the supply_voltage"),
        (dict(limit_class="D", power_w=50.0), "75 W < P <= 600 W"),
        (dict(limit_class="A", max_order=41), "max_order"),
        (dict(limit_class="A", max_order=1), "max_order"),
        (dict(limit_class="A", max_order=3.0), "max_order"),
    ],
)
def test_line_current_check_bad_input_one_line(kwargs, match):
    i = line_current({1: 0.8, 3: 0.3})
    with pytest.raises(InputError, match=match) as exc:
        line_current_check(i, supply_voltage=None, **kwargs)
    assert_one_line(exc)


def test_line_current_check_short_spectrum_or_other_fundamental_refused():
    short = Spectrum(50.0, [0.0, 1.0, 0.0, 0.3], np.zeros(4))
    with pytest.raises(InputError, match="holds 3 harmonics") as exc:
        line_current_check(short, supply_voltage=None, limit_class="A")
    assert_one_line(exc)
    with pytest.raises(InputError, match="same fundamental") as exc:
        line_current_check(line_current({1: 1.0}), supply_voltage=mains_sine(f0=60.0), limit_class="A")
    assert_one_line(exc)
    # a current given with the wrong sign gives negative power: refused for Class D, not a pass
    backwards = line_current({1: 0.8, 3: 0.3}, phases={1: math.pi})
    with pytest.raises(InputError, match="outside the Class D range") as exc:
        line_current_check(backwards, supply_voltage=mains_sine(), limit_class="D")
    assert_one_line(exc)


def test_mains_doctests():
    result = doctest.testmod(mains, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0 and result.failed == 0
