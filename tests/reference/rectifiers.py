"""Independent reference solutions for diode rectifiers, from first principles.

This module shares no code with simloop (it never imports it). It solves the same circuits that
simloop hands to ngspice, with the same diode equations that ngspice 39 evaluates, by exact
(to rounding) algebraic solves and by a tightly controlled ODE integration with shooting, so that
tests can judge simloop's harmonics against it.

Diode model (SPICE level-1 junction, IS, N, RS only; CJO = 0, TT = 0, BV = infinite, IKF = 0),
with V the junction voltage (inside RS), Vte = N k T / q::

    I(V) = IS (exp(V / Vte) - 1) + GMIN V                       V >= -3 Vte
    I(V) = -IS (1 + (3 Vte / (e V))^3) + GMIN V                 V <  -3 Vte

The reverse branch is ngspice's own (it is not -IS(1 - exp(V/Vte))); both branches and their
slopes meet at V = -3 Vte. The exponential is not limited for large forward bias: ngspice limits
only the Newton *step* (DEVpnjlim), not the converged solution. GMIN (default 1e-12 S) sits in
parallel with the junction, inside RS.

Sources: ngspice's diode model source (dioload.c, diotemp.c) read in a public copy; the constants
were measured on the installed engine (ngspice 39.3, Debian 39.3+ds-1); see README.md.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import integrate

# --- constants of the engine ---------------------------------------------------------------------
# ngspice computes Vt = CONSTKoverQ * T with CONSTKoverQ = CONSTboltz / CHARGE. The public copy of
# ngspice's src/include/ngspice/const.h that could be read holds the 1972 values of Berkeley
# SPICE3 (CONSTboltz 1.3806226e-23, CHARGE 1.6021918e-19), but the engine installed here (ngspice
# 39.3) was *measured*: 1 mA forced into a diode (IS 1e-14, N 1, GMIN 1e-12, reltol 1e-10) gives
# V = 0.65511790... V, hence k/q = 8.617330337217213e-05 V/K, which equals
# 1.38064852e-23 / 1.6021766208e-19 (CODATA 2014) to all 16 digits; the 1972 pair would give
# 8.61708e-05 and the exact SI-2019 pair (1.380649e-23, 1.602176634e-19) 8.617333262e-05.
BOLTZMANN = 1.38064852e-23  # CONSTboltz in ngspice 39 [J/K] (CODATA 2014)
CHARGE = 1.6021766208e-19  # CHARGE in ngspice 39 [C] (CODATA 2014)
CELSIUS_TO_KELVIN = 273.15  # CONSTCtoK in ngspice
GMIN_DEFAULT = 1e-12  # ngspice's default .options gmin [S]
EG_DEFAULT = 1.11  # SPICE diode default EG [eV]
XTI_DEFAULT = 3.0  # SPICE diode default XTI
_EPS = np.finfo(float).eps
_MAX_ITER = 200

Phase = Literal["sine", "cosine"]


# --- the junction --------------------------------------------------------------------------------
@dataclass(frozen=True, slots=True)
class Junction:
    """A SPICE junction at its operating temperature.

    Parameters
    ----------
    isat : float
        Saturation current at the operating temperature, IS(T) [A].
    vte : float
        N times the thermal voltage, N k T / q [V].
    gmin : float
        Conductance in parallel with the junction [S].
    """

    isat: float
    vte: float
    gmin: float


def thermal_voltage(temp_c: float = 27.0) -> float:
    """Thermal voltage k T / q with the engine's constants [V].

    Parameters
    ----------
    temp_c : float
        Temperature [degC]; T = temp_c + 273.15 [K].

    Returns
    -------
    float
        Vt [V]; 0.025864917007157463 V at 27 degC (T = 300.15 K).

    Examples
    --------
    >>> print(f"{thermal_voltage(27.0):.9f}")
    0.025864917
    """
    return (BOLTZMANN / CHARGE) * (temp_c + CELSIUS_TO_KELVIN)


def make_junction(
    *,
    is_: float,
    n: float,
    gmin: float = GMIN_DEFAULT,
    temp_c: float = 27.0,
    tnom_c: float = 27.0,
    eg: float = EG_DEFAULT,
    xti: float = XTI_DEFAULT,
) -> Junction:
    """Build the junction of a SPICE diode model at temperature ``temp_c``.

    Parameters
    ----------
    is_ : float
        Saturation current IS at TNOM [A], > 0.
    n : float
        Emission coefficient N, > 0.
    gmin : float
        Parallel conductance GMIN [S], >= 0.
    temp_c, tnom_c : float
        Circuit temperature and model nominal temperature [degC].
    eg, xti : float
        Activation energy EG [eV] and saturation-current exponent XTI (used only when
        temp_c != tnom_c).

    Returns
    -------
    Junction

    Raises
    ------
    ValueError
        On a non-positive IS or N, a negative GMIN, or a temperature below absolute zero.

    Notes
    -----
    As in ngspice's diotemp.c, with T and Tnom in kelvin and Vte = N k T / q::

        IS(T) = IS exp((T / Tnom - 1) EG / Vte + (XTI / N) ln(T / Tnom))

    which is IS exactly at T = Tnom.

    Examples
    --------
    >>> j = make_junction(is_=1e-14, n=1.0)
    >>> print(f"{j.isat:.3g} {j.vte:.6f}")
    1e-14 0.025865
    """
    _check_positive("is_", is_, "the saturation current IS in amperes, e.g. is_=1e-14")
    _check_positive("n", n, "the emission coefficient N, e.g. n=1.0")
    _check_nonnegative("gmin", gmin, "a conductance in siemens, e.g. gmin=1e-12 (0 to drop it)")
    temp_k = temp_c + CELSIUS_TO_KELVIN
    tnom_k = tnom_c + CELSIUS_TO_KELVIN
    if not (temp_k > 0.0 and tnom_k > 0.0):
        raise ValueError(f"temperatures must exceed -273.15 degC, got temp_c={temp_c}, tnom_c={tnom_c}")
    vte = n * thermal_voltage(temp_c)
    isat = is_
    if temp_c != tnom_c:  # diotemp.c; exp(0) = 1 would give IS exactly anyway
        ratio = temp_k / tnom_k
        isat = is_ * math.exp((ratio - 1.0) * eg / vte + xti / n * math.log(ratio))
    return Junction(isat=float(isat), vte=float(vte), gmin=float(gmin))


def junction_current(
    v: ArrayLike,
    *,
    is_: float,
    n: float,
    gmin: float = GMIN_DEFAULT,
    temp_c: float = 27.0,
) -> NDArray[np.float64]:
    """Current through a SPICE junction (with GMIN) at junction voltage ``v`` [A].

    Parameters
    ----------
    v : array_like
        Junction voltage, anode minus cathode, inside the series resistance [V].
    is_, n, gmin, temp_c
        As in :func:`make_junction`.

    Returns
    -------
    ndarray
        I(V) [A] (see the module docstring for the two branches).

    Examples
    --------
    >>> print(f"{float(junction_current(0.6, is_=1e-14, n=1.0, gmin=0.0)):.6e}")
    1.187196e-04
    """
    j = make_junction(is_=is_, n=n, gmin=gmin, temp_c=temp_c)
    return _law(np.asarray(v, dtype=float), j)[0]


def _law(v: NDArray[np.float64], j: Junction) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Vectorised junction current and conductance (dioload.c, no breakdown)."""
    fwd = v >= -3.0 * j.vte
    x = np.where(fwd, v, 0.0) / j.vte
    vr = np.where(fwd, -1.0, v)  # dummy on the forward side keeps the cube finite
    arg = (3.0 * j.vte / (vr * math.e)) ** 3
    i = np.where(fwd, j.isat * np.expm1(x), -j.isat * (1.0 + arg)) + j.gmin * v
    g = np.where(fwd, j.isat * np.exp(x) / j.vte, j.isat * 3.0 * arg / vr) + j.gmin
    return i, g


def _law_scalar(v: float, j: Junction) -> tuple[float, float]:
    """Scalar twin of :func:`_law` (pure ``math``; used inside quadratures and ODE right sides)."""
    if v >= -3.0 * j.vte:
        x = v / j.vte
        return j.isat * math.expm1(x) + j.gmin * v, j.isat * math.exp(x) / j.vte + j.gmin
    arg = (3.0 * j.vte / (v * math.e)) ** 3
    return -j.isat * (1.0 + arg) + j.gmin * v, j.isat * 3.0 * arg / v + j.gmin


# --- the loop equation  V + R I(V) = c -----------------------------------------------------------
def _start(c: NDArray[np.float64] | float, r: float, j: Junction):
    """Upper end of the bracket of the root of V + r I(V) = c (the function is >= 0 there)."""
    if isinstance(c, float):
        if c <= 0.0:
            return 0.0
        return min(c, j.vte * math.log1p(c / (r * j.isat)))
    pos = c > 0.0
    cp = np.where(pos, c, 0.0)
    return np.where(pos, np.minimum(cp, j.vte * np.log1p(cp / (r * j.isat))), 0.0)


def solve_loop(
    c: ArrayLike, r: float, j: Junction
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Solve V + r I(V) = c for the junction voltage V and its current I, element-wise.

    Parameters
    ----------
    c : array_like
        Voltage driving the loop (source minus everything that is not the junction) [V].
    r : float
        Total resistance in series with the junction [ohm], >= 0.
    j : Junction

    Returns
    -------
    v, i : ndarray
        Junction voltage [V] and current [A].

    Notes
    -----
    g(V) = V + r I(V) - c is increasing and convex (I is increasing and convex on both branches),
    so Newton's method started from a point where g >= 0 decreases monotonically onto the root
    and never overshoots. The start is V0 = min(c, Vte ln(1 + c/(r IS))) for c > 0 (there
    r I(V0) >= c) and V0 = 0 for c <= 0; hence exp(V/Vte) <= 1 + c/(r IS) and nothing overflows,
    even for N -> 0. The current is returned from the better-conditioned of the two expressions:
    (c - V)/r where the junction conducts (r dI/dV > 1), I(V) elsewhere.
    """
    c = np.asarray(c, dtype=float)
    if r == 0.0:
        i, _ = _law(c, j)
        return c.copy(), i
    x = _start(c, r, j)
    lo = np.minimum(c, 0.0)
    for _ in range(_MAX_ITER):
        i, g = _law(x, j)
        dx = (x + r * i - c) / (1.0 + r * g)
        x_new = np.maximum(x - dx, lo)
        done = np.abs(x_new - x) <= 4.0 * _EPS * (np.abs(x) + np.abs(c)) + 1e-300
        x = x_new
        if np.all(done):
            break
    else:  # pragma: no cover - Newton from above on a convex function always converges
        raise RuntimeError("junction solve did not converge")
    i, g = _law(x, j)
    i = np.where(r * g > 1.0, (c - x) / r, i)
    return x, i


def _solve_loop_scalar(c: float, r: float, j: Junction) -> tuple[float, float, float]:
    """Scalar twin of :func:`solve_loop`; returns (V, I, dI/dV)."""
    if r == 0.0:
        i, g = _law_scalar(c, j)
        return c, i, g
    x = _start(c, r, j)
    lo = min(c, 0.0)
    for _ in range(_MAX_ITER):
        i, g = _law_scalar(x, j)
        x_new = max(x - (x + r * i - c) / (1.0 + r * g), lo)
        if abs(x_new - x) <= 4.0 * _EPS * (abs(x) + abs(c)) + 1e-300:
            x = x_new
            break
        x = x_new
    else:  # pragma: no cover
        raise RuntimeError("junction solve did not converge")
    i, g = _law_scalar(x, j)
    if r * g > 1.0:
        i = (c - x) / r
    return x, i, g


# --- sources and validation ----------------------------------------------------------------------
def _source(t: NDArray[np.float64] | float, vm: float, freq: float, phase: Phase):
    w = 2.0 * math.pi * freq
    if isinstance(t, float):
        return vm * (math.sin(w * t) if phase == "sine" else math.cos(w * t))
    return vm * (np.sin(w * t) if phase == "sine" else np.cos(w * t))


def _check_positive(name: str, value: float, hint: str) -> None:
    if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0.0):
        raise ValueError(f"{name} must be a finite number > 0, got {value!r}: give {hint}")


def _check_nonnegative(name: str, value: float, hint: str) -> None:
    if not (isinstance(value, (int, float)) and math.isfinite(value) and value >= 0.0):
        raise ValueError(f"{name} must be a finite number >= 0, got {value!r}: give {hint}")


def _check_circuit(vm: float, freq: float, rs: float, rl: float, rser: float, phase: str) -> None:
    if not (isinstance(vm, (int, float)) and math.isfinite(vm)):
        raise ValueError(f"vm must be a finite amplitude in volts, got {vm!r}")
    _check_positive("freq", freq, "the source frequency in hertz, e.g. freq=50.0")
    _check_nonnegative("rs", rs, "the source resistance in ohms (0 allowed)")
    _check_positive("rl", rl, "the load resistance in ohms, e.g. rl=1e3")
    _check_nonnegative("rser", rser, "the diode series resistance RS in ohms (0 allowed)")
    if phase not in ("sine", "cosine"):
        raise ValueError(f"phase must be 'sine' or 'cosine', got {phase!r}")


def _as_time(t: ArrayLike) -> tuple[NDArray[np.float64] | float, bool]:
    if np.ndim(t) == 0:
        return float(t), True
    return np.asarray(t, dtype=float), False


# --- resistive circuits --------------------------------------------------------------------------
def half_wave_resistive(
    t: ArrayLike,
    *,
    vm: float,
    freq: float,
    rs: float,
    rl: float,
    is_: float,
    n: float,
    rser: float = 0.0,
    phase: Phase = "sine",
    gmin: float = GMIN_DEFAULT,
    temp_c: float = 27.0,
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Half-wave rectifier with a resistive load, solved exactly at each instant.

    Circuit: source vm sin(2 pi freq t) (or cos) -> rs -> diode (IS, N, RS = rser, GMIN) ->
    node out -> rl -> ground.

    Parameters
    ----------
    t : array_like
        Times [s] (absolute: t = 0 is the start of the SIN source).
    vm : float
        Source amplitude [V].
    freq : float
        Source frequency [Hz].
    rs, rl : float
        Source and load resistance [ohm] (rs >= 0, rl > 0).
    is_, n, rser : float
        Diode IS [A], N, RS [ohm].
    phase : {"sine", "cosine"}
        Source waveform: vm sin(w t) (ngspice SIN) or vm cos(w t).
    gmin : float
        Conductance across the junction [S] (ngspice default 1e-12).
    temp_c : float
        Circuit temperature [degC] (TNOM is 27 degC).

    Returns
    -------
    v_out, i_d : ndarray (float for scalar ``t``)
        Load voltage [V] and diode current [A].

    Raises
    ------
    ValueError
        On a non-finite or out-of-range parameter.

    Notes
    -----
    No element stores energy, so each instant is a DC problem: with R = rs + rser + rl and the
    junction voltage V, Kirchhoff's voltage law is ``vs(t) = V + R I(V)``, solved by
    :func:`solve_loop` to rounding (relative error ~1e-15 of the current), then
    ``v_out = rl I``. The Lambert-W closed form applies only without GMIN and the reverse branch;
    the monotone Newton solve covers the full ngspice law instead.

    References
    ----------
    W. Shockley, "The theory of p-n junctions in semiconductors and p-n junction transistors,"
    Bell Syst. Tech. J. 28, 1949, eq. (3.13) (the junction law).

    Examples
    --------
    At the crest of a 10 V source into 1 kohm:

    >>> v, i = half_wave_resistive(0.25e-3, vm=10.0, freq=1e3, rs=0.0, rl=1e3,
    ...                            is_=1e-14, n=1.0)
    >>> print(f"{v:.6f} V, {i * 1e3:.6f} mA")
    9.287238 V, 9.287238 mA
    """
    _check_circuit(vm, freq, rs, rl, rser, phase)
    j = make_junction(is_=is_, n=n, gmin=gmin, temp_c=temp_c)
    tt, scalar = _as_time(t)
    r = rs + rser + rl
    vs = _source(tt, vm, freq, phase)
    if scalar:
        _, i, _ = _solve_loop_scalar(vs, r, j)
        return rl * i, i
    _, i = solve_loop(vs, r, j)
    return rl * i, i


def bridge_resistive(
    t: ArrayLike,
    *,
    vm: float,
    freq: float,
    rs: float,
    rl: float,
    is_: float,
    n: float,
    rser: float = 0.0,
    phase: Phase = "sine",
    gmin: float = GMIN_DEFAULT,
    temp_c: float = 27.0,
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Full-wave bridge of four identical diodes with a resistive load, solved at each instant.

    Circuit: a floating source vm sin(2 pi freq t) in series with rs between nodes p and m;
    D1 p -> o+, D2 m -> o+, D3 o- -> p, D4 o- -> m; rl between o+ and o-.

    Parameters
    ----------
    t, vm, freq, rs, rl, is_, n, rser, phase, gmin, temp_c
        As in :func:`half_wave_resistive`.

    Returns
    -------
    v_out, i_src : ndarray (float for scalar ``t``)
        Output voltage v(o+) - v(o-) [V] (equal to v(out) when o- is the ground node) and the
        source current, out of the source's + terminal into node p [A].

    Notes
    -----
    The map {all potentials -> -potentials, p <-> m, o+ <-> o-} takes the circuit onto itself
    (it exchanges D1 with D4 and D2 with D3, and the series rs may sit on either side of the
    source). A resistive network of strictly increasing two-terminal characteristics driven by
    a source through positive resistance has exactly one solution (Duffin 1947), so that
    solution is invariant: D1 and D4 share the junction voltage x, D2 and D3 share y. With
    A = rser + rl and B = rser + rs, the node equations reduce to::

        (x + y) + A (I(x) + I(y)) = 0          (current into o+ equals current in rl)
        (x - y) + B (I(x) - I(y)) = vs         (loop p -> D1 -> rl -> D4 -> m -> source)

    For vs >= 0 the first equation gives x(y) through :func:`solve_loop` (c = -(y + A I(y)),
    r = A) and the second becomes G(y) = 0 with G strictly decreasing and G(-vs) >= 0 >= G(0);
    it is solved by Newton's method safeguarded by bisection on that bracket. For vs < 0 the
    roles of the diode pairs swap (x <-> y), so v_out(-vs) = v_out(vs) and i_src(-vs) =
    -i_src(vs). Then v_out = rl (I(x) + I(y)) and i_src = I(x) - I(y).

    References
    ----------
    R. J. Duffin, "Nonlinear networks. IIa," Bull. Amer. Math. Soc. 53(10), 1947, pp. 963-971
    (uniqueness for monotone resistive networks) [from memory].

    Examples
    --------
    >>> v, i = bridge_resistive(0.25e-3, vm=10.0, freq=1e3, rs=0.0, rl=1e3, is_=1e-14, n=1.0)
    >>> print(f"{v:.6f} V, {i * 1e3:.6f} mA")
    8.578583 V, 8.578583 mA
    """
    _check_circuit(vm, freq, rs, rl, rser, phase)
    j = make_junction(is_=is_, n=n, gmin=gmin, temp_c=temp_c)
    tt, scalar = _as_time(t)
    if scalar:
        vs = _source(tt, vm, freq, phase)
        _, _, ix, iy = _bridge_solve_scalar(abs(vs), rs=rs, rl=rl, rser=rser, j=j)
        return rl * (ix + iy), math.copysign(1.0, vs) * (ix - iy)
    vs = np.asarray(_source(tt, vm, freq, phase), dtype=float)
    sgn = np.where(vs < 0.0, -1.0, 1.0)
    x, y, ix, iy = _bridge_solve(np.abs(vs), rs=rs, rl=rl, rser=rser, j=j)
    return rl * (ix + iy), sgn * (ix - iy)


def _bridge_solve(vs: NDArray[np.float64], *, rs: float, rl: float, rser: float, j: Junction):
    """Solve the reduced bridge equations for vs >= 0; returns (x, y, I(x), I(y))."""
    a_res = rser + rl
    b_res = rser + rs

    def inner(y: NDArray[np.float64]):
        iy, gy = _law(y, j)
        x, ix = solve_loop(-(y + a_res * iy), a_res, j)
        _, gx = _law(x, j)
        gval = (x - y) + b_res * (ix - iy) - vs
        dxdy = -(1.0 + a_res * gy) / (1.0 + a_res * gx)
        dg = (1.0 + b_res * gx) * dxdy - (1.0 + b_res * gy)
        return gval, dg, x, ix, iy

    lo = -vs.copy()  # G(lo) >= 0
    hi = np.zeros_like(vs)  # G(hi) <= 0
    y = 0.5 * (lo + hi)
    for _ in range(_MAX_ITER):
        gval, dg, x, ix, iy = inner(y)
        lo = np.where(gval > 0.0, y, lo)
        hi = np.where(gval <= 0.0, y, hi)
        y_new = y - gval / dg
        bad = ~((y_new > lo) & (y_new < hi))
        y_new = np.where(bad, 0.5 * (lo + hi), y_new)
        done = (np.abs(y_new - y) <= 4.0 * _EPS * (np.abs(y) + vs) + 1e-300) | (gval == 0.0)
        y = np.where(done, y, y_new)
        if np.all(done):
            break
    else:  # pragma: no cover
        raise RuntimeError("bridge solve did not converge")
    gval, dg, x, ix, iy = inner(y)
    return x, y, ix, iy


def _bridge_solve_scalar(vs: float, *, rs: float, rl: float, rser: float, j: Junction):
    """Scalar twin of :func:`_bridge_solve`."""
    a_res = rser + rl
    b_res = rser + rs

    def inner(y: float):
        iy, gy = _law_scalar(y, j)
        x, ix, gx = _solve_loop_scalar(-(y + a_res * iy), a_res, j)
        gval = (x - y) + b_res * (ix - iy) - vs
        dg = -(1.0 + b_res * gx) * (1.0 + a_res * gy) / (1.0 + a_res * gx) - (1.0 + b_res * gy)
        return gval, dg, x, ix, iy

    lo, hi = -vs, 0.0
    y = 0.5 * (lo + hi)
    for _ in range(_MAX_ITER):
        gval, dg, x, ix, iy = inner(y)
        if gval == 0.0:
            break
        if gval > 0.0:
            lo = y
        else:
            hi = y
        y_new = y - gval / dg
        if not lo < y_new < hi:
            y_new = 0.5 * (lo + hi)
        if abs(y_new - y) <= 4.0 * _EPS * (abs(y) + vs) + 1e-300:
            break
        y = y_new
    else:  # pragma: no cover
        raise RuntimeError("bridge solve did not converge")
    return x, y, ix, iy


# --- half-wave with a reservoir capacitor --------------------------------------------------------
@dataclass(frozen=True, slots=True, eq=False)
class CapacitorSolution:
    """Periodic (or transient) solution of the half-wave rectifier with a reservoir capacitor.

    Attributes
    ----------
    freq : float
        Source frequency [Hz].
    vc0 : float
        Capacitor (= output) voltage at t = 0 [V]; for the periodic solution the steady state.
    t_end : float
        End of the integrated span [s] (one period for the periodic solution).
    periodic : bool
        True when ``v_out`` and ``i_d`` extend periodically beyond [0, t_end].
    residual : float
        |v_out(T) - v_out(0)| of the final periodic pass [V] (0 for a transient).
    step_times : ndarray
        The integrator's step ends in [0, t_end] [s] (break points of the dense output).
    conduction_times : ndarray
        Instants in [0, t_end) where the junction crosses its knee (incremental resistance equal
        to rs + rser): start and end of each conduction pulse [s].
    a0, amp, phase : float, ndarray, ndarray
        Harmonics of v_out from quadrature states integrated with the ODE (periodic solution
        only, otherwise empty): f = a0 + sum amp[n] cos(n w t - phase[n]); amp[0] = a0.
    """

    freq: float
    vc0: float
    t_end: float
    periodic: bool
    residual: float
    step_times: NDArray[np.float64] = field(repr=False)
    conduction_times: NDArray[np.float64]
    a0: float
    amp: NDArray[np.float64] = field(repr=False)
    phase: NDArray[np.float64] = field(repr=False)
    _dense: Callable[[NDArray[np.float64]], NDArray[np.float64]] = field(repr=False)
    _current: Callable[[float, float], float] = field(repr=False)

    def v_out(self, t: ArrayLike) -> NDArray[np.float64]:
        """Output (capacitor) voltage at times ``t`` [V] (float for scalar t)."""
        tt = np.asarray(t, dtype=float)
        if self.periodic:
            tt = np.mod(tt, self.t_end)
        v = np.asarray(self._dense(np.atleast_1d(tt).ravel()), dtype=float)[0]
        return float(v[0]) if tt.ndim == 0 else v.reshape(tt.shape)

    def i_d(self, t: ArrayLike) -> NDArray[np.float64]:
        """Diode current at times ``t`` [A] (float for scalar t)."""
        tt = np.asarray(t, dtype=float)
        flat = np.atleast_1d(tt).ravel()
        vc = np.atleast_1d(self.v_out(flat))
        i = np.array([self._current(float(a), float(b)) for a, b in zip(flat, vc)])
        return float(i[0]) if tt.ndim == 0 else i.reshape(tt.shape)


def _capacitor_system(
    *,
    vm: float,
    freq: float,
    rs: float,
    rl: float,
    c: float,
    rser: float,
    phase: Phase,
    j: Junction,
    harmonics: int,
    sensitivity: bool,
):
    """Right side and Jacobian of C dvc/dt = i_d(vs - vc) - vc/rl, optionally augmented.

    State layout: [vc, (S = d vc / d vc0), (q_0, q_1 .. q_N, p_1 .. p_N)] with
    q_k' = vc cos(k w t), p_k' = vc sin(k w t).
    """
    r = rs + rser
    w = 2.0 * math.pi * freq
    ks = np.arange(0, harmonics + 1, dtype=float)
    nq = 0 if harmonics < 0 else 2 * harmonics + 1
    ns = 1 + (1 if sensitivity else 0)
    size = ns + nq

    def current(t: float, vc: float) -> tuple[float, float, float]:
        v, i, g = _solve_loop_scalar(_source(t, vm, freq, phase) - vc, r, j)
        return v, i, g

    def rhs(t: float, state: NDArray[np.float64]) -> NDArray[np.float64]:
        vc = float(state[0])
        _, i, g = current(t, vc)
        out = np.empty(size)
        out[0] = (i - vc / rl) / c
        if sensitivity:
            out[1] = -(g / (1.0 + r * g) + 1.0 / rl) / c * state[1]
        if nq:
            out[ns : ns + harmonics + 1] = vc * np.cos(ks * w * t)
            out[ns + harmonics + 1 :] = vc * np.sin(ks[1:] * w * t)
        return out

    def jac(t: float, state: NDArray[np.float64]) -> NDArray[np.float64]:
        vc = float(state[0])
        _, _, g = current(t, vc)
        dfdv = -(g / (1.0 + r * g) + 1.0 / rl) / c
        m = np.zeros((size, size))
        m[0, 0] = dfdv
        if sensitivity:
            m[1, 1] = dfdv  # the d(dfdv)/dvc * S term is left out: Radau needs no exact Jacobian
        if nq:
            m[ns : ns + harmonics + 1, 0] = np.cos(ks * w * t)
            m[ns + harmonics + 1 :, 0] = np.sin(ks[1:] * w * t)
        return m

    def knee_event(t: float, state: NDArray[np.float64]) -> float:
        v, _, _ = current(t, float(state[0]))
        return v - knee_v

    # junction voltage where its incremental resistance equals the series resistance r
    knee_v = j.vte * math.log(max(j.vte / (r * j.isat), 1.0)) if r > 0.0 else 0.0
    return rhs, jac, knee_event, current, size


def _check_stiffness(
    method: str, *, freq: float, rs: float, rser: float, rl: float, c: float
) -> None:
    """Refuse an explicit method when the conduction time constant is far below the period."""
    r = rs + rser
    tau = r * rl / (r + rl) * c  # the diode's own resistance only lengthens it
    if method in ("DOP853", "RK45", "RK23") and 1.0 / freq > 1e5 * tau:
        raise ValueError(
            f"the circuit is stiff (period / time constant = {1.0 / (freq * tau):.3g} > 1e5) for "
            f"method={method!r}: give method='LSODA' or 'Radau' with rtol=1e-12"
        )


def _integrate(rhs, jac, events, y0, t_end, *, rtol, atol, method, dense):
    kwargs = {"jac": jac} if method in ("Radau", "BDF", "LSODA") else {}
    sol = integrate.solve_ivp(
        rhs,
        (0.0, t_end),
        y0,
        method=method,
        rtol=rtol,
        atol=atol,
        dense_output=dense,
        events=events,
        **kwargs,
    )
    if not sol.success:  # pragma: no cover
        raise RuntimeError(f"solve_ivp failed: {sol.message}")
    return sol


def half_wave_capacitor(
    *,
    vm: float,
    freq: float,
    rs: float,
    rl: float,
    c: float,
    is_: float,
    n: float,
    rser: float = 0.0,
    phase: Phase = "sine",
    gmin: float = GMIN_DEFAULT,
    temp_c: float = 27.0,
    harmonics: int = 10,
    rtol: float = 3e-14,
    method: str = "DOP853",
) -> CapacitorSolution:
    """Periodic steady state of a half-wave rectifier with a reservoir capacitor, by shooting.

    Circuit: source vm sin(2 pi freq t) -> rs -> diode (IS, N, RS = rser, GMIN) -> node out;
    capacitor c and load rl from out to ground.

    Parameters
    ----------
    vm, freq, rs, rl, is_, n, rser, phase, gmin, temp_c
        As in :func:`half_wave_resistive`; rs + rser must be > 0 (otherwise the source would
        drive the capacitor through the bare junction and the ODE becomes a DAE).
    c : float
        Reservoir capacitance [F].
    harmonics : int
        Number of harmonics of v_out integrated as quadrature states (0 to skip).
    rtol : float
        Relative tolerance of ``solve_ivp`` (absolute tolerance rtol * 1e-3 * |vm|). The
        default 3e-14 (the smallest DOP853 accepts is 100 eps) gives harmonics to ~2e-14 |vm|
        and samples to ~1e-12 |vm| (against Radau at 1e-13); give ~1e-12 to implicit methods.
    method : str
        ``solve_ivp`` method: "DOP853" (explicit Runge-Kutta of order 8 with a 7th-order dense
        output; by far the fastest at tight tolerances for the mildly stiff conduction pulses)
        or the implicit "Radau", "BDF", "LSODA" (given the analytic Jacobian) for stiff cases:
        DOP853 is refused when the period exceeds 1e5 times the shortest time constant
        (rs + rser) || rl times c.

    Returns
    -------
    CapacitorSolution
        With ``vc0`` the periodic initial state and ``v_out``/``i_d`` periodic callables.

    Raises
    ------
    ValueError
        On out-of-range parameters.

    Notes
    -----
    With c_loop = vs(t) - vc and r = rs + rser, the diode current i_d solves
    c_loop = V + r I(V) (:func:`solve_loop`), and::

        C dvc/dt = i_d(t, vc) - vc / rl.

    The period map P(v0) = vc(T; v0) is increasing with slope S(T) = dvc(T)/dv0 in (0, 1)
    (the variational equation S' = (df/dvc) S with df/dvc < 0 is integrated alongside), so
    h(v0) = P(v0) - v0 is strictly decreasing with h(-|vm|) > 0 > h(|vm|). Newton's method
    v0 <- v0 - h/(S - 1), safeguarded by that bracket, converges in a few periods; the final
    pass integrates the quadrature states q_k = int vc cos(k w t) dt, p_k = int vc sin(k w t)
    dt under the same error control, so a_k = 2 q_k / T and b_k = 2 p_k / T carry the
    integrator's accuracy rather than that of its dense output.

    References
    ----------
    T. J. Aprille and T. N. Trick, "Steady-state analysis of nonlinear circuits with periodic
    inputs," Proc. IEEE 60(1), 1972, pp. 108-114 (shooting) [from memory].

    Examples
    --------
    >>> sol = half_wave_capacitor(vm=10.0, freq=50.0, rs=1.0, rl=1e3, c=100e-6,
    ...                           is_=1e-14, n=1.0, harmonics=2)
    >>> print(f"v0 = {sol.vc0:.4f} V, mean = {sol.a0:.4f} V, periodic: {sol.residual < 1e-10}")
    v0 = 7.9909 V, mean = 8.4993 V, periodic: True
    """
    _check_circuit(vm, freq, rs, rl, rser, phase)
    _check_positive("c", c, "the reservoir capacitance in farads, e.g. c=100e-6")
    if not rs + rser > 0.0:
        raise ValueError("rs + rser must be > 0 with a capacitor: give a source resistance, e.g. rs=1.0")
    if not (isinstance(harmonics, int) and harmonics >= 0):
        raise ValueError(f"harmonics must be an integer >= 0, got {harmonics!r}")
    _check_stiffness(method, freq=freq, rs=rs, rser=rser, rl=rl, c=c)
    j = make_junction(is_=is_, n=n, gmin=gmin, temp_c=temp_c)
    period = 1.0 / freq
    scale = max(abs(vm), 1e-30)
    atol = rtol * 1e-3 * scale

    rhs, jac, _, _, _ = _capacitor_system(
        vm=vm, freq=freq, rs=rs, rl=rl, c=c, rser=rser, phase=phase, j=j,
        harmonics=-1, sensitivity=True,
    )
    lo, hi = -scale, scale
    v0 = 0.9 * abs(vm)
    for _ in range(60):
        sol = _integrate(
            rhs, jac, None, [v0, 1.0], period, rtol=rtol, atol=atol, method=method, dense=False
        )
        p_v, s_v = float(sol.y[0, -1]), float(sol.y[1, -1])
        h = p_v - v0
        if h > 0.0:
            lo = max(lo, v0)
        else:
            hi = min(hi, v0)
        v_new = v0 - h / (s_v - 1.0)
        if not lo < v_new < hi:
            v_new = 0.5 * (lo + hi)
        if abs(v_new - v0) <= 1e-14 * scale or hi - lo <= 1e-14 * scale:
            v0 = v_new
            break
        v0 = v_new
    else:  # pragma: no cover
        raise RuntimeError("shooting did not converge")

    rhs, jac, knee, current, _ = _capacitor_system(
        vm=vm, freq=freq, rs=rs, rl=rl, c=c, rser=rser, phase=phase, j=j,
        harmonics=harmonics, sensitivity=False,
    )
    y0 = np.zeros(1 + (2 * harmonics + 1))
    y0[0] = v0
    atols = np.full(y0.size, atol * period)  # quadrature states are integrals over a period [V s]
    atols[0] = atol
    sol = _integrate(rhs, jac, [knee], y0, period, rtol=rtol, atol=atols, method=method, dense=True)
    quad = sol.y[1:, -1]
    a = 2.0 * freq * quad[: harmonics + 1]
    b = np.concatenate(([0.0], 2.0 * freq * quad[harmonics + 1 :]))
    a0 = 0.5 * a[0]
    amp = np.hypot(a, b)
    amp[0] = a0
    ph = _atan2_wrapped(b, a)
    ph[0] = 0.0
    dense = sol.sol
    return CapacitorSolution(
        freq=freq,
        vc0=v0,
        t_end=period,
        periodic=True,
        residual=abs(float(sol.y[0, -1]) - v0),
        step_times=np.asarray(sol.t, dtype=float),
        conduction_times=np.sort(np.asarray(sol.t_events[0], dtype=float)),
        a0=float(a0),
        amp=amp,
        phase=ph,
        _dense=lambda tt: dense(tt)[:1],
        _current=lambda t, vc: current(t, vc)[1],
    )


def half_wave_capacitor_transient(
    *,
    vm: float,
    freq: float,
    rs: float,
    rl: float,
    c: float,
    is_: float,
    n: float,
    periods: int,
    rser: float = 0.0,
    phase: Phase = "sine",
    gmin: float = GMIN_DEFAULT,
    temp_c: float = 27.0,
    vc0: float = 0.0,
    rtol: float = 3e-14,
    method: str = "DOP853",
) -> CapacitorSolution:
    """Start-up transient of the half-wave capacitor rectifier from vc(0) = ``vc0``.

    Parameters
    ----------
    vm, freq, rs, rl, c, is_, n, rser, phase, gmin, temp_c, rtol, method
        As in :func:`half_wave_capacitor`.
    periods : int
        Number of source periods to integrate, >= 1.
    vc0 : float
        Initial capacitor voltage [V] (0: a discharged capacitor, like ngspice's operating point
        with the SIN source at 0 V).

    Returns
    -------
    CapacitorSolution
        Non-periodic; ``v_out``/``i_d`` are valid on [0, periods / freq]; no harmonics.

    Notes
    -----
    The same ODE as :func:`half_wave_capacitor`, integrated once from ``vc0``.

    Examples
    --------
    >>> tr = half_wave_capacitor_transient(vm=10.0, freq=50.0, rs=1.0, rl=1e3, c=100e-6,
    ...                                    is_=1e-14, n=1.0, periods=2)
    >>> print(f"{tr.v_out(0.005):.4f} V at the first crest")
    9.2349 V at the first crest
    """
    _check_circuit(vm, freq, rs, rl, rser, phase)
    _check_positive("c", c, "the reservoir capacitance in farads, e.g. c=100e-6")
    if not rs + rser > 0.0:
        raise ValueError("rs + rser must be > 0 with a capacitor: give a source resistance, e.g. rs=1.0")
    if not (isinstance(periods, int) and periods >= 1):
        raise ValueError(f"periods must be an integer >= 1, got {periods!r}")
    _check_stiffness(method, freq=freq, rs=rs, rser=rser, rl=rl, c=c)
    j = make_junction(is_=is_, n=n, gmin=gmin, temp_c=temp_c)
    rhs, jac, knee, current, _ = _capacitor_system(
        vm=vm, freq=freq, rs=rs, rl=rl, c=c, rser=rser, phase=phase, j=j,
        harmonics=-1, sensitivity=False,
    )
    t_end = periods / freq
    atol = rtol * 1e-3 * max(abs(vm), 1e-30)
    sol = _integrate(
        rhs, jac, [knee], [float(vc0)], t_end, rtol=rtol, atol=atol, method=method, dense=True
    )
    dense = sol.sol
    empty = np.zeros(0)
    return CapacitorSolution(
        freq=freq,
        vc0=float(vc0),
        t_end=t_end,
        periodic=False,
        residual=0.0,
        step_times=np.asarray(sol.t, dtype=float),
        conduction_times=np.sort(np.asarray(sol.t_events[0], dtype=float)),
        a0=float("nan"),
        amp=empty,
        phase=empty,
        _dense=lambda tt: dense(tt)[:1],
        _current=lambda t, vc: current(t, vc)[1],
    )


# --- Fourier coefficients ------------------------------------------------------------------------
def _atan2_wrapped(b: NDArray[np.float64], a: NDArray[np.float64]) -> NDArray[np.float64]:
    ph = np.arctan2(b, a)
    return np.where(ph == -np.pi, np.pi, ph)


def fourier_amplitudes(
    func: Callable[[float], float],
    *,
    freq: float,
    harmonics: int,
    breakpoints: Sequence[float] = (),
    t0: float = 0.0,
    epsrel: float = 1e-13,
) -> tuple[float, NDArray[np.float64], NDArray[np.float64]]:
    """Fourier coefficients of a periodic function by adaptive Gauss-Kronrod quadrature.

    Parameters
    ----------
    func : callable
        f(t) for a scalar time t [s], returning a float; periodic with period 1/freq.
    freq : float
        Fundamental frequency [Hz].
    harmonics : int
        Highest harmonic N, >= 1.
    breakpoints : sequence of float
        Instants where f has kinks or fast changes (diode turn-on/turn-off, integrator steps);
        taken modulo the period [s].
    t0 : float
        Start of the integration period [s]; the phase origin stays at absolute t = 0.
    epsrel : float
        Tolerance, relative to max |f| sampled on the period (absolute floor of the error).

    Returns
    -------
    a0 : float
        Mean value.
    amp, phase : ndarray, length N + 1
        ``amp[n]`` = A_n and ``phase[n]`` = psi_n [rad] in (-pi, pi] for n = 1..N, with
        f(t) = A0 + sum A_n cos(n w t - psi_n); ``amp[0]`` = a0 (signed) and ``phase[0]`` = 0.

    Raises
    ------
    ValueError
        On a non-positive frequency or harmonic count.

    Notes
    -----
    a_n = (2/T) int f cos(n w t) dt, b_n = (2/T) int f sin(n w t) dt, A_n = hypot(a_n, b_n),
    psi_n = atan2(b_n, a_n). All 2N + 1 integrands are integrated together by
    ``scipy.integrate.quad_vec`` (QUADPACK-style global adaptive GK21 with max-norm error
    control), splitting the period at the break points; each f(t) is evaluated once per node.
    When A_n is at the noise level its phase is meaningless (compare a_n - j b_n instead).

    Examples
    --------
    The half-wave rectified sine max(0, sin w t): A1 = 1/2 with psi_1 = pi/2:

    >>> a0, amp, ph = fourier_amplitudes(lambda t: max(0.0, math.sin(2 * math.pi * t)),
    ...                                   freq=1.0, harmonics=2, breakpoints=[0.5])
    >>> print(f"{a0:.12f} {amp[1]:.12f} {ph[1]:.12f} {amp[2]:.12f}")
    0.318309886184 0.500000000000 1.570796326795 0.212206590789
    """
    _check_positive("freq", freq, "the fundamental frequency in hertz")
    if not (isinstance(harmonics, int) and harmonics >= 1):
        raise ValueError(f"harmonics must be an integer >= 1, got {harmonics!r}")
    period = 1.0 / freq
    w = 2.0 * math.pi * freq
    ks = np.arange(1, harmonics + 1, dtype=float)
    pts = sorted({t0 + (float(p) - t0) % period for p in breakpoints} - {t0})
    pts = [p for p in pts if t0 < p < t0 + period]
    grid = np.linspace(t0, t0 + period, 257)
    scale = max(max(abs(float(func(float(s)))) for s in grid), 1e-300)

    def integrand(t: float) -> NDArray[np.float64]:
        y = float(func(t))
        return np.concatenate(([y], y * np.cos(ks * w * t), y * np.sin(ks * w * t)))

    res, _err = integrate.quad_vec(
        integrand,
        t0,
        t0 + period,
        epsabs=epsrel * scale * period,
        epsrel=0.0,
        norm="max",
        points=pts or None,
        limit=100000,
    )
    a0 = float(res[0] / period)
    a = 2.0 * res[1 : harmonics + 1] / period
    b = 2.0 * res[harmonics + 1 :] / period
    amp = np.concatenate(([a0], np.hypot(a, b)))
    phase = np.concatenate(([0.0], _atan2_wrapped(b, a)))
    return a0, amp, phase


# --- break points of the resistive circuits ------------------------------------------------------
def resistive_breakpoints(
    *,
    vm: float,
    freq: float,
    rs: float,
    rl: float,
    is_: float,
    n: float,
    rser: float = 0.0,
    phase: Phase = "sine",
    gmin: float = GMIN_DEFAULT,
    temp_c: float = 27.0,
    diodes_in_series: int = 1,
) -> NDArray[np.float64]:
    """Instants in [0, T) where a resistive rectifier's waveform bends most, for quadrature.

    Parameters
    ----------
    vm, freq, rs, rl, is_, n, rser, phase, gmin, temp_c
        As in :func:`half_wave_resistive`.
    diodes_in_series : int
        1 for the half-wave circuit, 2 for the bridge (two diodes conduct in series).

    Returns
    -------
    ndarray
        Sorted instants [s]: source zero crossings and crests, the knee (where a junction's
        incremental resistance equals the loop resistance R) and the seam of the reverse law
        (V = -3 Vte), each for both polarities of the source.

    Notes
    -----
    Knee: I'(V) = 1/R gives V_k = Vte ln(Vte / (R IS)), reached when |vs| = m (V_k + R I(V_k))
    with m diodes in series and R = rs + m rser + rl (per diode, R/m). Only an aid to the
    quadrature: the integrals do not depend on these points beyond their tolerance.

    Examples
    --------
    >>> bp = resistive_breakpoints(vm=10.0, freq=1.0, rs=0.0, rl=1e3, is_=1e-14, n=1.0)
    >>> print(len(bp), f"{bp[1]:.6f}")
    12 0.001235
    """
    _check_circuit(vm, freq, rs, rl, rser, phase)
    j = make_junction(is_=is_, n=n, gmin=gmin, temp_c=temp_c)
    m = float(diodes_in_series)
    r = (rs + m * rser + rl) / m
    levels = [0.0]
    ratio = j.vte / (r * j.isat)
    if ratio > 1.0:
        vk = j.vte * math.log(ratio)
        levels.append(m * (vk + r * _law_scalar(vk, j)[0]))
    vseam = -3.0 * j.vte
    levels.append(abs(m * (vseam + r * _law_scalar(vseam, j)[0])))
    w = 2.0 * math.pi * freq
    period = 1.0 / freq
    out = {0.0, 0.25 * period, 0.5 * period, 0.75 * period}
    for lev in levels:
        if lev < abs(vm):
            s = math.asin(lev / abs(vm))
            for theta in (s, math.pi - s, math.pi + s, 2.0 * math.pi - s):
                out.add((theta / w) % period)
    times = np.array(sorted(out))
    if phase == "cosine":  # cos(w t) = sin(w t + pi/2): shift by a quarter period
        times = np.sort((times - 0.25 * period) % period)
    return times
