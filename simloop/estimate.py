"""Drop-corrected analytic estimates: what theory predicts once the diode's forward drop is known.

A rectifier diode is replaced by an ideal switch in series with a constant drop V_d, taken from
the diode model at the operating (peak) current, and its series resistance is lumped with the
source and load resistances. With a resistive load the current is then a truncated cosine of
half-angle theta = arccos(V_d / V_m) and peak (V_m - V_d) / R; with a reservoir capacitor the
same ideal-switch circuit is solved numerically for its periodic steady state. Switching stages
are estimated by the trapezoidal pulse train of their gate timing.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from .errors import InputError
from .ideal import conduction_angle_for_drop, truncated_cosine
from .spectrum import Spectrum
from .vocab import TimeReference

#: Boltzmann constant [J/K] and elementary charge [C] (CODATA 2018, exact).
BOLTZMANN = 1.380649e-23
CHARGE = 1.602176634e-19
#: SPICE's nominal temperature, 27 degC [K].
T_NOMINAL = 300.15


def thermal_voltage(temp_c: float = 27.0) -> float:
    """kT/q [V] at ``temp_c`` [degC]; 25.865 mV at SPICE's nominal 27 degC."""
    return BOLTZMANN * (temp_c + 273.15) / CHARGE


def junction_drop(current: float, *, saturation_current: float, emission: float,
                  temp_c: float = 27.0) -> float:
    """Forward voltage of a Shockley junction at ``current`` [A]: N Vt ln(I / IS + 1) [V].

    References
    ----------
    W. Shockley, "The theory of p-n junctions in semiconductors and p-n junction transistors,"
    Bell System Technical Journal 28(3), 1949 (ideal diode law) [from memory].
    """
    if current <= 0:
        return 0.0
    return emission * thermal_voltage(temp_c) * math.log1p(current / saturation_current)


def operating_drop(
    amplitude: float,
    *,
    resistance: float,
    saturation_current: float,
    emission: float,
    diodes_in_path: int = 1,
    temp_c: float = 27.0,
) -> tuple[float, float]:
    """Constant drop of the conducting path at its peak current, by fixed-point iteration.

    Parameters
    ----------
    amplitude : float
        Drive peak V_m [V].
    resistance : float
        Total series resistance of the conducting path (source + diodes' RS + load) [ohm].
    saturation_current, emission : float
        Diode model IS [A] and N [-].
    diodes_in_path : int
        Diodes conducting in series (1 half-wave and centre-tap, 2 bridge).

    Returns
    -------
    drop : float
        Total junction drop of the path at the peak current [V].
    peak_current : float
        (V_m - drop) / resistance [A].
    """
    if resistance <= 0:
        raise InputError("the conducting path needs a positive series resistance for the estimate")
    drop = 0.0
    for _ in range(60):
        peak = max(amplitude - drop, 0.0) / resistance
        new = diodes_in_path * junction_drop(
            peak, saturation_current=saturation_current, emission=emission, temp_c=temp_c
        )
        if abs(new - drop) < 1e-12:
            drop = new
            break
        drop = new
    return drop, max(amplitude - drop, 0.0) / resistance


def _sine_shift(fundamental_hz: float, reference: TimeReference) -> float:
    return 0.25 / fundamental_hz if reference == "sine" else 0.0


def resistive_rectifier(
    amplitude: float,
    drop: float,
    *,
    resistance: float,
    load: float,
    harmonics: int,
    fundamental_hz: float,
    full_wave: bool = False,
    reference: TimeReference = "sine",
) -> Spectrum:
    """Load-voltage spectrum of a rectifier with a constant drop and resistive load.

    Notes
    -----
    i(t) = (V_m cos wt - V_d) / R while positive: a truncated cosine of half-angle
    theta = arccos(V_d / V_m) and peak I_max = (V_m - V_d) / R; v_load = R_L i. A full-wave
    rectifier adds the same pulse half a period later, which doubles the even harmonics and
    cancels the odd ones.

    References
    ----------
    S. C. Cripps, *RF Power Amplifiers for Wireless Communications*, 2nd ed., Artech House, 2006,
    ch. 3 (reduced-conduction-angle current coefficients) [from memory].
    """
    if drop >= amplitude:
        n = harmonics + 1
        return Spectrum(fundamental_hz, np.zeros(n), np.zeros(n))
    angle = conduction_angle_for_drop(amplitude, drop)
    peak = load * (amplitude - drop) / resistance
    spec = truncated_cosine(peak, angle, harmonics=harmonics, fundamental_hz=fundamental_hz)
    if full_wave:
        n = np.arange(1, harmonics + 1)
        c = spec.complex_amplitude * (1.0 + np.exp(-1j * np.pi * n))
        spec = Spectrum.from_complex(fundamental_hz, 2.0 * spec.dc, c)
    return spec.delayed(_sine_shift(fundamental_hz, reference))


def reservoir_rectifier(
    amplitude: float,
    drop: float,
    *,
    source_resistance: float,
    load: float,
    capacitance: float,
    harmonics: int,
    fundamental_hz: float,
    full_wave: bool = False,
    reference: TimeReference = "sine",
) -> tuple[Spectrum, float]:
    """Load-voltage spectrum of a constant-drop rectifier into a reservoir capacitor || load.

    The ideal-switch circuit C dv/dt = max(0, |v_s| - V_d - v) / R_s - v / R_L (|v_s| for
    full-wave, v_s for half-wave) is integrated over one period and its periodic initial voltage
    found by a root search on v(T) - v(0) (shooting; T. J. Aprille and T. N. Trick, Proc. IEEE
    60(1), 1972 [from memory]).

    Returns
    -------
    spectrum : Spectrum
    peak_current : float
        Largest diode current over the period [A] (to refine the drop).
    """
    from .fourier import spectrum_from_samples

    if source_resistance <= 0:
        raise InputError("the reservoir estimate needs a positive source + diode series resistance")
    w = 2.0 * math.pi * fundamental_hz
    period = 1.0 / fundamental_hz
    phase = -math.pi / 2 if reference == "sine" else 0.0

    def drive(t):
        v = amplitude * np.cos(w * t + phase)
        return np.abs(v) if full_wave else v

    def rhs(t, y):
        i = max(0.0, float(drive(t)) - drop - y[0]) / source_resistance
        return [(i - y[0] / load) / capacitance]

    steps = 4000
    grid = np.linspace(0.0, period, steps + 1)

    def one_period(v0: float, dense: bool = False):
        sol = solve_ivp(rhs, (0.0, period), [v0], method="LSODA", rtol=1e-10, atol=1e-12 * amplitude,
                        max_step=period / steps, t_eval=grid if dense else None)
        return sol

    top = max(amplitude - drop, 0.0)
    parallel = source_resistance * load / (source_resistance + load)
    if capacitance * parallel < 1e-6 * period:
        # The capacitor settles within a millionth of a period: it changes nothing measurable
        # and would only make the equation stiff. The resistive closed form is the limit.
        spec = resistive_rectifier(amplitude, drop, resistance=source_resistance + load,
                                   load=load, harmonics=harmonics, fundamental_hz=fundamental_hz,
                                   full_wave=full_wave, reference=reference)
        return spec, top / (source_resistance + load)
    if top == 0.0:
        n = harmonics + 1
        return Spectrum(fundamental_hz, np.zeros(n), np.zeros(n)), 0.0
    v0 = brentq(lambda v: one_period(v).y[0, -1] - v, 0.0, top, xtol=1e-12 * top)
    sol = one_period(v0, dense=True)
    v = sol.y[0]
    current = np.maximum(0.0, drive(grid) - drop - v) / source_resistance
    spec = spectrum_from_samples(grid, v, fundamental_hz=fundamental_hz, harmonics=harmonics,
                                 periods=1)
    return spec, float(current.max())
