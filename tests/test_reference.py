"""Validation of the independent rectifier reference (tests/reference) against outside facts.

The reference is what simloop's ngspice harmonics are judged against, so it is itself checked
here against published closed forms, first principles (Kirchhoff's laws, energy balance,
symmetry), independent solvers (scipy's Wright omega, brentq, fsolve, quad) and a second ODE
integrator. Nothing here imports simloop.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, optimize, special

from reference import rectifiers as ref

VT27 = 1.38064852e-23 / 1.6021766208e-19 * 300.15  # ngspice 39.3 constants at 27 degC (README)


def _harmonics(func, *, freq, harmonics, breakpoints=()):
    """Mean and complex amplitudes C_n = a_n - j b_n = A_n exp(-j psi_n) (C_0 = a0)."""
    a0, amp, phase = ref.fourier_amplitudes(
        func, freq=freq, harmonics=harmonics, breakpoints=breakpoints
    )
    return a0, amp * np.exp(-1j * phase)


def _wave(circuit, p, k):
    """Scalar waveform k (0: output voltage, 1: current) of a resistive reference circuit."""
    return lambda t: circuit(t, **p)[k]


def _cplx(sol):
    """Complex amplitudes of a capacitor solution's quadrature-state harmonics."""
    return sol.amp * np.exp(-1j * sol.phase)


def _ideal_half_wave_sine(amplitude: float, harmonics: int) -> np.ndarray:
    """C_n of A max(0, sin wt) = A/pi + (A/2) sin wt - (2A/pi) sum cos(2k wt)/(4k^2 - 1).

    Spiegel, Mathematical Handbook of Formulas and Tables (Schaum), Fourier series table
    [from memory].
    """
    c = np.zeros(harmonics + 1, dtype=complex)
    c[0] = amplitude / math.pi
    c[1] = -0.5j * amplitude  # b1 = A/2
    for n in range(2, harmonics + 1, 2):
        c[n] = -2.0 * amplitude / (math.pi * (n * n - 1))
    return c


# --- the junction law and the engine's constants -------------------------------------------------
def test_thermal_voltage_engine_constants():
    # ngspice 39.3 measured: k/q = CONSTboltz/CHARGE = 1.38064852e-23/1.6021766208e-19 (README)
    assert ref.thermal_voltage(27.0) == pytest.approx(VT27, rel=1e-15)
    assert ref.thermal_voltage(27.0) == pytest.approx(0.025864917007157463, rel=1e-15)
    # CODATA 2018 exact constants give a Vt 3.4e-7 relative higher: the engine's are the old ones
    assert ref.thermal_voltage(27.0) < 1.380649e-23 / 1.602176634e-19 * 300.15 * (1 - 3e-7)


def test_make_junction_is_unchanged_at_tnom():
    # SPICE: IS(T) = IS exp((T/Tnom - 1) EG/(N Vt) + XTI/N ln(T/Tnom)) is IS at T = Tnom
    # (Massobrio & Antognetti, Semiconductor Device Modeling with SPICE, 1993, ch. 1 [from memory])
    j = ref.make_junction(is_=2.5e-9, n=1.75, temp_c=27.0)
    assert j.isat == 2.5e-9
    assert j.vte == pytest.approx(1.75 * VT27, rel=1e-15)
    hot = ref.make_junction(is_=2.5e-9, n=1.75, temp_c=77.0)
    t, t0 = 77.0 + 273.15, 300.15
    vte_hot = 1.75 * VT27 * t / t0
    expected = 2.5e-9 * math.exp((t / t0 - 1) * 1.11 / vte_hot + 3.0 / 1.75 * math.log(t / t0))
    assert hot.isat == pytest.approx(expected, rel=1e-13)


def test_junction_current_seam_is_continuous():
    # ngspice's reverse law -IS(1 + (3Vte/(eV))^3) meets IS(exp(V/Vte) - 1) at -3Vte, slopes equal
    j = ref.make_junction(is_=1e-9, n=1.5, gmin=0.0)
    v0 = -3.0 * j.vte
    h = 1e-9 * j.vte
    i_left, i_right = ref.junction_current([v0 - h, v0 + h], is_=1e-9, n=1.5, gmin=0.0)
    assert i_left == pytest.approx(i_right, rel=1e-8)
    assert i_right == pytest.approx(1e-9 * (math.exp(-3.0) - 1.0), rel=1e-8)
    slope_left = (i_left - ref.junction_current(v0 - 1e-3 * j.vte, is_=1e-9, n=1.5, gmin=0.0)) / (
        (1e-3 - 1e-9) * j.vte
    )
    assert slope_left == pytest.approx(1e-9 * math.exp(-3.0) / j.vte, rel=2e-3)


def test_junction_current_gmin_is_parallel():
    v = np.array([-5.0, -0.01, 0.0, 0.3, 0.7])
    with_g = ref.junction_current(v, is_=1e-14, n=1.0, gmin=1e-12)
    without = ref.junction_current(v, is_=1e-14, n=1.0, gmin=0.0)
    # the difference of two currents carries their rounding, 4 eps |I|
    tol = 4 * np.finfo(float).eps * np.max(np.abs(with_g))
    np.testing.assert_allclose(with_g - without, 1e-12 * v, rtol=0.0, atol=tol)


# --- half-wave, resistive load -------------------------------------------------------------------
def test_half_wave_resistive_wright_omega_closed_form():
    # Without GMIN and in forward bias, V + R IS(exp(V/Vte) - 1) = vs has the closed form
    # i = (Vte/R) W((IS R/Vte) exp((vs + IS R)/Vte)) - IS, with W(e^x) = omega(x) (Wright omega).
    # Corless & Jeffrey, "The Wright omega function," LNCS 2385, 2002 [from memory].
    p = dict(vm=10.0, freq=50.0, rs=2.0, rl=1e3, is_=2.5e-9, n=1.75, rser=0.5, gmin=0.0)
    t = np.linspace(1e-4, 9.9e-3, 99)  # positive half cycle
    _, i = ref.half_wave_resistive(t, **p)
    vte = 1.75 * VT27
    r = p["rs"] + p["rser"] + p["rl"]
    vs = 10.0 * np.sin(2 * np.pi * 50.0 * t)
    x = np.log(p["is_"] * r / vte) + (vs + p["is_"] * r) / vte
    closed = vte / r * special.wrightomega(x).real - p["is_"]
    np.testing.assert_allclose(i, closed, rtol=1e-12, atol=1e-22)


def test_half_wave_resistive_scalar_and_array_agree():
    p = dict(vm=10.0, freq=50.0, rs=1.0, rl=1e3, is_=2.5e-9, n=1.75, rser=0.5)
    t = np.linspace(0.0, 0.02, 201)
    v, i = ref.half_wave_resistive(t, **p)
    vs = np.array([ref.half_wave_resistive(float(x), **p) for x in t])
    np.testing.assert_allclose(vs[:, 0], v, rtol=0, atol=4e-15)
    np.testing.assert_allclose(vs[:, 1], i, rtol=0, atol=4e-18)


@pytest.mark.parametrize("phase", ["sine", "cosine"])
def test_half_wave_resistive_near_ideal_diode_approaches_closed_form(phase):
    # N = 1e-5 makes the junction an almost ideal switch: its drop never exceeds
    # Vd = N Vt ln(1 + vm/(rl IS)) ~ 7e-6 V, so |a_n - a_n,ideal| <= 2 Vd (first principles).
    vm, freq = 10.0, 50.0
    p = dict(vm=vm, freq=freq, rs=0.0, rl=1e3, is_=1e-14, n=1e-5, rser=0.0, gmin=0.0, phase=phase)
    vd = 1e-5 * VT27 * math.log1p(vm / (1e3 * 1e-14))
    bp = ref.resistive_breakpoints(**p)
    wave = _wave(ref.half_wave_resistive, p, 0)
    a0, c = _harmonics(wave, freq=freq, harmonics=10, breakpoints=bp)
    ideal = _ideal_half_wave_sine(vm, 10)
    if phase == "cosine":
        # A max(0, cos wt): a1 = A/2, a_n = -(2A/pi)(-1)^(n/2)/(n^2 - 1) for even n
        # (a2 = +0.212207 A, a4 = -0.042441 A); Spiegel (Schaum), table [from memory]
        ideal = np.zeros(11, dtype=complex)
        ideal[0], ideal[1] = vm / math.pi, vm / 2
        for n in range(2, 11, 2):
            ideal[n] = -(2 * vm / math.pi) * (-1) ** (n // 2) / (n * n - 1)
        assert ideal[2].real == pytest.approx(0.212207 * vm, abs=5e-7 * vm)
        assert ideal[4].real == pytest.approx(-0.042441 * vm, abs=5e-7 * vm)
    assert a0 == pytest.approx(vm / math.pi, abs=vd)
    np.testing.assert_allclose(c, ideal, rtol=0, atol=2 * vd)
    assert a0 < vm / math.pi  # the drop only ever lowers the output


def test_half_wave_resistive_dc_current_truncated_cosine():
    # Truncated-cosine pulse: theta = arccos(Vd/Vm), Imax = (Vm - Vd)/R,
    # alpha0 = (sin th - th cos th)/(pi (1 - cos th)); check case Vm 10 V, Vd 0.7 V, 1 kohm:
    # Idc = 2.8409 mA. Cripps, RF Power Amplifiers for Wireless Communications, 2nd ed. 2006,
    # ch. 3 [from memory].
    vm, vd, r = 10.0, 0.7, 1e3
    th = math.acos(vd / vm)
    alpha0 = (math.sin(th) - th * math.cos(th)) / (math.pi * (1 - math.cos(th)))
    i_max = (vm - vd) / r
    idc_drop = alpha0 * i_max
    assert math.degrees(th) == pytest.approx(85.986, abs=5e-4)
    assert alpha0 == pytest.approx(0.30547, abs=5e-6)
    assert idc_drop == pytest.approx(2.8409e-3, abs=5e-8)
    # A Shockley diode whose drop is exactly 0.7 V at that peak current: IS = Imax/(e^(0.7/Vt) - 1).
    # Its drop is below 0.7 V at every smaller current, so it conducts earlier and longer than the
    # constant-drop model and its DC current is higher, but only by a little (0.3 %): the
    # logarithmic law changes the drop by N Vt ln(10) ~ 60 mV per decade, small against Vm.
    is_ = i_max / math.expm1(vd / VT27)
    p = dict(vm=vm, freq=50.0, rs=0.0, rl=r, is_=is_, n=1.0, rser=0.0, phase="cosine")
    _, i_peak = ref.half_wave_resistive(0.0, **p)
    assert i_peak == pytest.approx(i_max, rel=1e-12)
    bp = ref.resistive_breakpoints(**p)
    a0, _ = _harmonics(_wave(ref.half_wave_resistive, p, 1), freq=50.0, harmonics=3, breakpoints=bp)
    assert a0 > idc_drop
    assert a0 == pytest.approx(idc_drop, rel=0.01)


@pytest.mark.parametrize("gmin", [0.0, 1e-12])
def test_half_wave_resistive_energy_balance(gmin):
    # Source power (1/T) int vs i dt = (vm/2) b1 (only the fundamental of i does work against a
    # sine source) = R <i^2> + <V_j(i) i>, with V_j recovered from i by inverting the junction
    # law with brentq (first principles: Tellegen's theorem for the loop).
    vm, freq = 10.0, 50.0
    p = dict(vm=vm, freq=freq, rs=2.0, rl=100.0, is_=2.5e-9, n=1.75, rser=0.5, gmin=gmin)
    r = p["rs"] + p["rser"] + p["rl"]
    bp = ref.resistive_breakpoints(**p)
    _, c = _harmonics(_wave(ref.half_wave_resistive, p, 1), freq=freq, harmonics=1, breakpoints=bp)
    p_source = 0.5 * vm * (-c[1].imag)  # b1 = -Im C_1

    def vj(i: float) -> float:
        f = lambda v: float(ref.junction_current(v, is_=p["is_"], n=p["n"], gmin=gmin)) - i
        hi = 1.75 * VT27 * math.log1p(max(i, 0.0) / p["is_"]) + 1e-12
        return optimize.brentq(f, -vm - 1.0, hi, xtol=1e-16)

    def loss(t: float) -> float:
        i = ref.half_wave_resistive(t, **p)[1]
        return r * i * i + vj(i) * i

    period = 1 / freq
    opts = dict(points=bp[1:], limit=500, epsabs=0, epsrel=1e-13)
    p_loss = integrate.quad(loss, 0, period, **opts)[0] / period
    source = _wave(ref.half_wave_resistive, p, 1)
    direct = integrate.quad(
        lambda t: vm * math.sin(2 * math.pi * freq * t) * source(t), 0, period, **opts
    )[0] / period
    assert p_source == pytest.approx(direct, rel=1e-11)
    assert p_loss == pytest.approx(p_source, rel=1e-10)


# --- bridge, resistive load ----------------------------------------------------------------------
def test_bridge_resistive_full_node_equations():
    # The symmetry-reduced solve against the full node equations (ground at o-, unknowns
    # v(p), v(m), v(o+)), solved by scipy's fsolve from a rough physical guess.
    p = dict(vm=10.0, freq=50.0, rs=5.0, rl=200.0, is_=2.5e-9, n=1.75, rser=0.0)
    law = lambda v: float(ref.junction_current(v, is_=p["is_"], n=p["n"]))
    for t in (1.3e-3, 4.0e-3, 5.0e-3, 12.0e-3, 15.0e-3, 18.5e-3):
        vs = 10.0 * math.sin(2 * math.pi * 50.0 * t)

        def kcl(u):
            vp, vmn, vo = u
            i_src = (vs - (vp - vmn)) / p["rs"]
            return [
                i_src + law(-vp) - law(vp - vo),
                -i_src + law(-vmn) - law(vmn - vo),
                law(vp - vo) + law(vmn - vo) - vo / p["rl"],
            ]

        drop = 1.0
        out = max(abs(vs) - 2 * drop, 0.0)
        guess = [out + drop, -drop, out] if vs > 0 else [-drop, out + drop, out]
        sol, info, ier, msg = optimize.fsolve(kcl, guess, full_output=True, xtol=1e-15)
        # ier 1 (converged) or 5/3 (no further improvement possible at rounding level): judge by
        # the residual of Kirchhoff's current law instead
        assert np.max(np.abs(kcl(sol))) < 1e-15, msg
        v_out, i_src = ref.bridge_resistive(t, **p)
        assert v_out == pytest.approx(sol[2], rel=1e-13)
        # fsolve's source current carries the cancellation in vs - (v(p) - v(m))
        assert i_src == pytest.approx((vs - (sol[0] - sol[1])) / p["rs"], rel=1e-11)


def test_bridge_resistive_symmetry_of_harmonics():
    # The output repeats every half period (only even harmonics and DC); the line current is
    # half-wave antisymmetric (only odd harmonics): first principles of the symmetric bridge.
    p = dict(vm=10.0, freq=50.0, rs=1.0, rl=1e3, is_=2.5e-9, n=1.75, rser=0.5)
    bp = ref.resistive_breakpoints(**p, diodes_in_series=2)
    _, cv = _harmonics(_wave(ref.bridge_resistive, p, 0), freq=50.0, harmonics=10, breakpoints=bp)
    i0, ci = _harmonics(_wave(ref.bridge_resistive, p, 1), freq=50.0, harmonics=10, breakpoints=bp)
    scale_v, scale_i = np.max(np.abs(cv)), np.max(np.abs(ci))
    np.testing.assert_allclose(cv[1::2], 0.0, atol=1e-12 * scale_v)
    np.testing.assert_allclose(ci[2::2], 0.0, atol=1e-12 * scale_i)
    assert abs(i0) < 1e-12 * scale_i


def test_bridge_resistive_near_ideal_diodes_approach_full_wave():
    # |A sin wt| = 2A/pi - (4A/pi) sum cos(2k wt)/(4k^2 - 1) (Spiegel, Schaum, table
    # [from memory]); two near-ideal drops in series bound the error by 4 Vd.
    vm = 10.0
    p = dict(vm=vm, freq=50.0, rs=0.0, rl=1e3, is_=1e-14, n=1e-5, rser=0.0, gmin=0.0)
    vd = 1e-5 * VT27 * math.log1p(vm / (1e3 * 1e-14))
    bp = ref.resistive_breakpoints(**p, diodes_in_series=2)
    a0, c = _harmonics(_wave(ref.bridge_resistive, p, 0), freq=50.0, harmonics=10, breakpoints=bp)
    ideal = np.zeros(11, dtype=complex)
    ideal[0] = 2 * vm / math.pi
    for n in range(2, 11, 2):
        ideal[n] = -4 * vm / (math.pi * (n * n - 1))
    assert a0 == pytest.approx(2 * vm / math.pi, abs=2 * vd)
    np.testing.assert_allclose(c, ideal, rtol=0, atol=4 * vd)


# --- Fourier coefficients ------------------------------------------------------------------------
def test_fourier_amplitudes_bessel_generating_function():
    # exp(z cos th) = I0(z) + 2 sum I_n(z) cos(n th): Abramowitz & Stegun, Handbook of
    # Mathematical Functions, 1964, eq. 9.6.34; here with th = w t - 0.4 rad
    z, freq, shift = 1.5, 3.0, 0.4
    w = 2 * math.pi * freq
    a0, c = _harmonics(lambda t: math.exp(z * math.cos(w * t - shift)), freq=freq, harmonics=10)
    assert a0 == pytest.approx(special.iv(0, z), rel=1e-13)
    n = np.arange(1, 11)
    # cos(n(wt - shift)) = cos(n wt - psi_n) with psi_n = n shift: C_n = 2 I_n(z) exp(-j n shift)
    expected = 2 * special.iv(n, z) * np.exp(-1j * n * shift)
    np.testing.assert_allclose(c[1:], expected, rtol=0, atol=1e-13 * a0)


def test_fourier_amplitudes_ideal_half_wave_with_breakpoints():
    # Spiegel (Schaum), Fourier series table [from memory]; the kinks at 0 and T/2 given as points
    freq = 50.0
    f = lambda t: 10.0 * max(0.0, math.sin(2 * math.pi * freq * t))
    a0, c = _harmonics(f, freq=freq, harmonics=10, breakpoints=[0.0, 0.01])
    np.testing.assert_allclose(c, _ideal_half_wave_sine(10.0, 10), rtol=0, atol=1e-12 * 10.0)


def test_fourier_amplitudes_breakpoints_do_not_change_result():
    p = dict(vm=10.0, freq=1e3, rs=1.0, rl=1e3, is_=2.5e-9, n=1.75, rser=0.5)
    f = _wave(ref.half_wave_resistive, p, 0)
    bp = ref.resistive_breakpoints(**p)
    _, with_bp = _harmonics(f, freq=1e3, harmonics=10, breakpoints=bp)
    _, without = _harmonics(f, freq=1e3, harmonics=10)
    np.testing.assert_allclose(with_bp, without, rtol=0, atol=1e-12 * np.max(np.abs(with_bp)))


# --- half-wave with a reservoir capacitor --------------------------------------------------------
@pytest.fixture(scope="module")
def peak_detector():
    """Half-wave, 50 Hz, 1 kohm, 1 mF: w R C = 314 (an invented 10 V bench case)."""
    return ref.half_wave_capacitor(vm=10.0, freq=50.0, rs=0.5, rl=1e3, c=1e-3, is_=1e-14, n=1.0)


def test_half_wave_capacitor_peak_detector_ripple(peak_detector):
    # Vr ~ Vp/(f R C) for w R C >~ 300: Sedra & Smith, Microelectronic Circuits, 7th ed., sec. 4.5
    # [from memory]. The estimate assumes linear discharge over the whole period; the true
    # discharge is shorter (by the conduction time) and exponential, so the ripple is a few
    # percent lower (7.7 % here).
    t = np.linspace(0.0, 0.02, 20001)
    v = peak_detector.v_out(t)
    vp = float(v.max())
    ripple = vp - float(v.min())
    estimate = vp / (50.0 * 1e3 * 1e-3)
    assert ripple == pytest.approx(estimate, rel=0.10)
    assert ripple < estimate


def test_half_wave_capacitor_is_periodic(peak_detector):
    sol = peak_detector
    assert sol.residual <= 1e-12 * 10.0
    # an independent pass from the steady state closes on itself
    again = ref.half_wave_capacitor_transient(
        vm=10.0, freq=50.0, rs=0.5, rl=1e3, c=1e-3, is_=1e-14, n=1.0, periods=1, vc0=sol.vc0
    )
    assert again.v_out(0.02) == pytest.approx(sol.vc0, abs=1e-12 * 10.0)
    assert sol.v_out(0.0123) == pytest.approx(sol.v_out(0.0123 + 3 * 0.02), abs=1e-15 * 10.0)


@pytest.fixture(scope="module")
def smoothing():
    """Half-wave, 50 Hz, 1 kohm, 100 uF: w R C = 31, large ripple and a wide conduction pulse."""
    return dict(vm=10.0, freq=50.0, rs=1.0, rl=1e3, c=100e-6, is_=2.5e-9, n=1.75, rser=0.5)


def test_half_wave_capacitor_kirchhoff_current_law(smoothing):
    # i_d = v/rl + C dv/dt  =>  I_n = V_n (1/rl + j n w C), I_0 = V_0/rl (first principles);
    # V_n from the ODE's quadrature states, I_n by quadrature of the dense solution.
    sol = ref.half_wave_capacitor(**smoothing)
    cv = _cplx(sol)
    bp = np.concatenate([sol.step_times, sol.conduction_times])
    i0, ci = _harmonics(sol.i_d, freq=50.0, harmonics=10, breakpoints=bp)
    n = np.arange(11)
    expected = cv * (1 / 1e3 + 1j * n * 2 * math.pi * 50.0 * 100e-6)
    expected[0] = cv[0] / 1e3
    np.testing.assert_allclose(ci, expected, rtol=0, atol=1e-11 * np.max(np.abs(ci)))


def test_half_wave_capacitor_dense_output_matches_quadrature_states(smoothing):
    sol = ref.half_wave_capacitor(**smoothing)
    bp = sol.step_times
    a0, amp, ph = ref.fourier_amplitudes(sol.v_out, freq=50.0, harmonics=10, breakpoints=bp)
    c_dense = amp * np.exp(-1j * ph)
    c_states = _cplx(sol)
    np.testing.assert_allclose(c_dense, c_states, rtol=0, atol=1e-12 * abs(sol.a0))


def test_half_wave_capacitor_integrators_agree(smoothing):
    # an implicit multistep integrator (LSODA with the analytic Jacobian) against DOP853
    rk = ref.half_wave_capacitor(**smoothing)
    ms = ref.half_wave_capacitor(**smoothing, method="LSODA", rtol=1e-12)
    assert ms.vc0 == pytest.approx(rk.vc0, abs=1e-10 * 10.0)
    np.testing.assert_allclose(_cplx(ms), _cplx(rk), rtol=0, atol=1e-10 * 10.0)


def test_half_wave_capacitor_transient_settles_to_periodic(smoothing):
    # R C = 10 ms and a strong conduction pulse: the period map contracts by ~1e-10 per period,
    # so from a discharged capacitor the start-up is gone after two periods
    fast = dict(smoothing, c=10e-6)
    sol = ref.half_wave_capacitor(**fast)
    tr = ref.half_wave_capacitor_transient(**fast, periods=3)
    assert tr.v_out(0.0) == 0.0
    t = np.linspace(2 * 0.02, 3 * 0.02, 401)
    np.testing.assert_allclose(tr.v_out(t), sol.v_out(t), rtol=0, atol=1e-11 * 10.0)


def test_half_wave_capacitor_tiny_capacitor_is_resistive(smoothing):
    # with C -> 0 the circuit becomes the resistive half-wave rectifier (first principles)
    p = dict(smoothing)
    p.pop("c")
    # 1 fF: far too stiff for the explicit default, which says so
    with pytest.raises(ValueError, match="stiff"):
        ref.half_wave_capacitor(**p, c=1e-15, harmonics=4)
    sol = ref.half_wave_capacitor(**p, c=1e-15, harmonics=4, method="LSODA", rtol=1e-12)
    bp = ref.resistive_breakpoints(**p)
    wave = _wave(ref.half_wave_resistive, p, 0)
    _, c_res = _harmonics(wave, freq=50.0, harmonics=4, breakpoints=bp)
    # the lag n w (R || rl) C ~ 5e-12 rad is negligible: what is left is LSODA's error (~1e-11 V)
    np.testing.assert_allclose(_cplx(sol), c_res, rtol=0, atol=1e-10 * 10.0)


# --- bad input -----------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("kwargs", "word"),
    [
        (dict(rl=0.0), "rl"),
        (dict(n=-1.0), "n"),
        (dict(is_=0.0), "is_"),
        (dict(freq=float("nan")), "freq"),
        (dict(phase="square"), "phase"),
        (dict(rser=-1.0), "rser"),
    ],
)
def test_half_wave_resistive_rejects_bad_input(kwargs, word):
    p = dict(vm=10.0, freq=50.0, rs=1.0, rl=1e3, is_=1e-14, n=1.0)
    p.update(kwargs)
    with pytest.raises(ValueError, match=word) as info:
        ref.half_wave_resistive(0.001, **p)
    assert "\n" not in str(info.value)


def test_half_wave_capacitor_rejects_zero_series_resistance():
    with pytest.raises(ValueError, match="rs \\+ rser"):
        ref.half_wave_capacitor(
            vm=10.0, freq=50.0, rs=0.0, rl=1e3, c=1e-6, is_=1e-14, n=1.0, rser=0.0
        )
