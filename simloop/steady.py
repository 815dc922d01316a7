"""Periodic steady state by settling: simulate until two successive whole periods agree.

The engine is asked for a transient of P periods; the last three periods are kept. On every
watched waveform, the change of its harmonics between the last two periods (the residual) and
the change still to come, estimated from the geometric decay of those changes (the drift), are
measured relative to the largest component; the drift must be below the tolerance. Otherwise P
is raised to what the decay predicts (1.5 to 4 times, at most ``max_periods``) and the run is
repeated. An unconverged result is returned marked ``converged=False``, never silently.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from .errors import InputError
from .vocab import STEADY_METHODS, SteadyMethod

#: Periods of data kept at the end of each run at the least (first attempt: 12 periods).
KEPT_PERIODS = 3
#: Largest spacing k [periods] between the three periods compared (P - 2k, P - k, P).
MAX_SPACING = 8


def spacing(periods: int) -> int:
    """Spacing k of the three compared periods: P // 4, between 1 and :data:`MAX_SPACING`.

    Comparing periods k apart rather than neighbours multiplies the settling signal by about k
    (for slow settling) while the step-to-step noise of the engine's points stays the same, so
    the decay ratio is measured k times more reliably; k <= 8 bounds the data kept.
    """
    return max(1, min(MAX_SPACING, periods // 4))

#: Fraction of the tolerance below which a period-to-period change of the harmonics that does
#: not decay is taken as the engine's step-to-step noise (ngspice's default VNTOL of 1 uV and
#: RELTOL of 1e-3 leave changes of 1e-8..1e-7 of a 10 V waveform), not as settling under way.
NOISE_FRACTION = 0.1


@dataclass(frozen=True, slots=True)
class SteadySettings:
    """How the periodic steady state is sought.

    Parameters
    ----------
    tolerance : float
        Largest allowed change of the harmonics still to come (estimated), relative to the
        largest harmonic or DC [-]. The default keeps the settling error ten times under the
        1e-5 accuracy target.
    first_periods : int
        Periods simulated in the first attempt.
    max_periods : int
        Give up (``converged=False``) beyond this many periods.
    tmax : float or None
        Engine's maximum internal step [s]; ``None`` derives it from the fundamental and the
        harmonics asked (see :func:`default_tmax`).
    timeout : float
        Wall-clock limit of each engine run [s].
    method : {"auto", "settle", "shoot"}
        ``settle``: plain simulation until periodic. ``auto``: when the first settling attempt
        has not converged, find the periodic state of the capacitors and inductors by
        shooting-Newton and verify it; fall back to settling if that fails. ``shoot``: shoot
        after a short first-guess run of 4 periods, whatever it shows.
    max_points : float
        Resource bound: most engine time steps one run may take (stop / TMAX). A request for
        more is refused before the engine sees it.
    max_output_bytes : float
        Resource bound: most bytes of saved vectors one run may hand back [B].
    """

    tolerance: float = 1e-6
    first_periods: int = 12
    max_periods: int = 2000
    tmax: float | None = None
    timeout: float = 120.0
    method: SteadyMethod = "auto"
    max_points: float = 20e6
    max_output_bytes: float = 512 * 2**20

    def __post_init__(self) -> None:
        for name in ("tolerance", "timeout", "max_points", "max_output_bytes", "tmax"):
            value = getattr(self, name)
            if value is not None and (isinstance(value, bool) or not isinstance(value, (int, float))):
                raise InputError(f"steady-state setting {name} must be a number, got {value!r}")
        for name in ("first_periods", "max_periods"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int):
                raise InputError(f"steady-state setting {name} must be a whole number, got {value!r}")
        if not (math.isfinite(self.tolerance) and 0 < self.tolerance < 1):
            raise InputError(
                f"steady-state tolerance must lie in (0, 1), got {self.tolerance!r}; try 1e-7"
            )
        if self.first_periods < KEPT_PERIODS:
            raise InputError(f"first_periods must be at least {KEPT_PERIODS}")
        if self.max_periods < self.first_periods:
            raise InputError(
                f"max periods ({self.max_periods}) must be at least the first attempt's "
                f"{self.first_periods}; raise --max-periods"
            )
        if self.tmax is not None and not (math.isfinite(self.tmax) and self.tmax > 0):
            raise InputError(f"TMAX must be a positive number of seconds, got {self.tmax!r}")
        if not (math.isfinite(self.timeout) and self.timeout > 0):
            raise InputError(f"timeout must be a positive number of seconds, got {self.timeout!r}")
        for name in ("max_points", "max_output_bytes"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value >= 1):
                raise InputError(f"{name.replace('_', ' ')} must be a number >= 1, got {value!r}")
        if self.method not in STEADY_METHODS:
            raise InputError(f"steady-state method {self.method!r} is unknown; use one of "
                             f"{', '.join(STEADY_METHODS)}")


@dataclass(frozen=True, slots=True)
class SteadyState:
    """The periodic steady state found, and how it was found.

    Attributes
    ----------
    time : array [s]
        Native engine time points of the last periods (at least ``KEPT_PERIODS``).
    vectors : mapping of name to array
        The engine vectors over the same points.
    periods_simulated : int
        Periods the engine simulated in the final attempt.
    engine_periods : int
        Periods simulated over all attempts (engine work).
    converged : bool
        Whether the remaining drift is below the tolerance.
    residual : float
        Largest change of the harmonics between periods P - k and P (k from :func:`spacing`),
        relative to the largest component [-].
    drift : float
        Estimated change still to come (geometric tail), relative to the largest component [-].
    tmax : float
        Engine maximum step used [s].
    engine_version : str
    attempts : int
    """

    time: NDArray[np.float64] = field(repr=False)
    vectors: Mapping[str, NDArray[np.float64]] = field(repr=False)
    periods_simulated: int
    engine_periods: int
    converged: bool
    residual: float
    drift: float
    tmax: float
    engine_version: str
    attempts: int
    method: str = "settle"
    iterations: int = 0
    shooting_residual: float | None = None
    fallback: str | None = None

    def figures(self) -> dict[str, float | int | bool | str]:
        """The figures for JSON output (``steady_state`` object)."""
        return {
            "method": self.method,
            "periods_simulated": self.periods_simulated,
            "engine_periods": self.engine_periods,
            "converged": self.converged,
            "residual": self.residual,
            "drift": self.drift,
            "tmax_s": self.tmax,
            "attempts": self.attempts,
            "shooting_iterations": self.iterations,
            "shooting_residual": self.shooting_residual,
            "fallback": self.fallback,
        }


def default_tmax(fundamental_hz: float, harmonics: int) -> float:
    """Engine maximum step for the accuracy target: T / max(2000, 200 N) [s].

    Notes
    -----
    With the trapezoidal method the error of the harmonics falls as TMAX^2. Measured here with
    cubic-spline resampling, T/1000 gives about 6e-6 of the largest component on a rectifier
    with a reservoir capacitor; T/2000 gives a four-fold margin under the 1e-5 target for N <= 10,
    and 200 points per period of the highest harmonic keeps the same margin for larger N.
    """
    return 1.0 / (fundamental_hz * max(2000, 200 * harmonics))


def period_spectra(
    time: NDArray[np.float64],
    x: NDArray[np.float64],
    *,
    period: float,
    end: float,
    count: int,
    harmonics: int,
    every: int = 1,
    grid: int = 4096,
) -> NDArray[np.complex128]:
    """Complex amplitudes C_0..C_N of ``count`` whole periods, ``every`` periods apart, the
    last ending at ``end``.

    A cubic spline through the native points is read on a uniform grid of ``grid`` points per
    period and transformed (FFT). The grid's own error is the same in every period of a
    periodic waveform, so it cancels in the differences between periods, which are all that
    this is used for. Row k is the k-th of the periods, oldest first.
    """
    from scipy.interpolate import CubicSpline

    _, keep = np.unique(time, return_index=True)
    spline = CubicSpline(time[keep], x[keep])
    rows = []
    offsets = np.arange(grid) * (period / grid)
    for k in range(count - 1, -1, -1):
        start = end - (k * every + 1) * period
        samples = spline(np.clip(start + offsets, time[0], time[-1]))
        c = np.fft.rfft(samples)[: harmonics + 1] * (2.0 / grid)
        c[0] *= 0.5
        rows.append(np.conj(c))  # C_n = a_n - j b_n convention of simloop.spectrum
    return np.asarray(rows)


def judge(
    time: NDArray[np.float64],
    waveforms: Sequence[NDArray[np.float64]],
    *,
    period: float,
    end: float,
    harmonics: int,
    noise: float,
    every: int = 1,
) -> tuple[float, float, float]:
    """Residual, estimated remaining drift and decay ratio of the harmonics' settling.

    Notes
    -----
    For each watched waveform the complex amplitudes X = (C_0..C_N) of three periods k apart
    (k = ``every``), relative to the largest amplitude, give two changes d0 = X_{P-k} - X_{P-2k}
    and d1 = X_P - X_{P-k}. The residual is max |d1|. Settling near the steady state is
    geometric, d1 = r d0 with one real ratio r for all harmonics, whereas the engine's
    step-to-step noise points in a random direction of the 2(N + 1)-dimensional space of the
    harmonics. So d1 is split into its part along d0, r = Re<d0, d1> / <d0, d0>, which is the
    settling signal, and the rest, which is noise: it does not accumulate, but the result is
    only known to within it. With 0 < r < 1 the drift is |r d0| r / (1 - r) + max |d1 - r d0|;
    with r <= 0 (no settling signal: noise, or a waveform that alternates between periods) it
    is max |d1|. With r >= 1 the waveform is not settling (yet) and the drift is infinite,
    unless max |d1| is below ``noise`` already.
    """
    residual = 0.0
    drift = 0.0
    slowest = 0.0
    for x in waveforms:
        c = period_spectra(time, x, period=period, end=end, count=3, every=every,
                           harmonics=harmonics)
        scale = float(np.max(np.abs(c[-1])))
        if scale == 0.0:
            continue
        v0 = (c[1] - c[0]) / scale
        v1 = (c[2] - c[1]) / scale
        d1 = float(np.max(np.abs(v1)))
        residual = max(residual, d1)
        energy = float(np.vdot(v0, v0).real)
        r = float(np.vdot(v0, v1).real) / energy if energy > 0 else 0.0
        signal = abs(r) * float(np.sqrt(energy))
        rest = float(np.max(np.abs(v1 - r * v0)))  # the part of the change that is not settling
        if d1 <= noise:
            tail = d1
        elif r <= 0.0:
            tail = d1  # not settling geometrically: the result is only known to within d1
        elif r < 1.0:
            tail = signal * r / (1.0 - r) + rest
            slowest = max(slowest, r ** (1.0 / every))
        else:
            tail = math.inf
            slowest = 1.0
        drift = max(drift, tail)
    return residual, drift, slowest


def next_period_count(periods: int, drift: float, rho: float, tolerance: float, *,
                      max_periods: int) -> int:
    """Periods for the next attempt.

    Where the settling is geometric (rho < 1), the drift shrinks by rho per period, so
    k = log(tolerance / drift) / log(rho) more periods should do; 20 % more are asked, and
    never fewer than 1.5 times nor more than 4 times the last attempt. Otherwise four times.
    """
    guess = 4 * periods
    if 0.0 < rho < 1.0 and math.isfinite(drift) and drift > 0:
        k = math.log(tolerance / drift) / math.log(rho)
        guess = int(math.ceil(periods + 1.2 * max(k, 1.0)))
        guess = min(max(guess, int(math.ceil(1.5 * periods))), 4 * periods)
    return min(guess, max_periods)


RunPeriods = Callable[[int, float], tuple[NDArray[np.float64], Mapping[str, NDArray[np.float64]], str]]
"""Signature of the engine hook: (periods, tstart) -> (time, vectors, engine_version)."""


def settle(
    run_periods: RunPeriods,
    *,
    fundamental_hz: float,
    watch: Callable[[Mapping[str, NDArray[np.float64]]], Sequence[NDArray[np.float64]]],
    settings: SteadySettings,
    tmax: float,
    harmonics: int,
    noise_fraction: float = NOISE_FRACTION,
) -> SteadyState:
    """Simulate longer until the watched waveforms stop changing from period to period.

    Parameters
    ----------
    run_periods : callable
        ``run_periods(periods, tstart)`` runs the engine for ``periods`` periods keeping data from
        ``tstart`` on and returns ``(time, vectors, engine_version)``.
    fundamental_hz : float
        Fundamental [Hz].
    watch : callable
        Maps the engine vectors to the waveforms whose periodicity is judged.
    settings : SteadySettings
    tmax : float
        Engine maximum step in use [s] (recorded).
    harmonics : int
        Harmonics 0..N whose settling is judged.
    noise_fraction : float
        Changes below this fraction of the tolerance count as engine noise whatever their
        trend. Circuits without capacitors or inductors have no slow state, so their callers
        pass 1.0: there a steady creep of 1e-8 per period, seen from ngspice's step control at
        high drive, is numerical, not settling.

    Returns
    -------
    SteadyState
    """
    period = 1.0 / fundamental_hz
    periods = settings.first_periods
    total = 0
    attempts = 0
    while True:
        attempts += 1
        every = spacing(periods)
        tstart = (periods - max(KEPT_PERIODS, 2 * every + 1)) * period
        time, vectors, version = run_periods(periods, tstart)
        total += periods
        end = periods * period
        residual, drift, rho = judge(time, watch(vectors), period=period, end=end,
                                     harmonics=harmonics,
                                     noise=noise_fraction * settings.tolerance, every=every)
        converged = drift <= settings.tolerance
        if converged or periods >= settings.max_periods:
            return SteadyState(
                time=time,
                vectors=vectors,
                periods_simulated=periods,
                engine_periods=total,
                converged=bool(converged),
                residual=residual,
                drift=drift,
                tmax=tmax,
                engine_version=version,
                attempts=attempts,
            )
        periods = next_period_count(periods, drift, rho, settings.tolerance,
                                    max_periods=settings.max_periods)


# ---------------------------------------------------------------------------- shooting
RunFromStates = Callable[
    [Sequence[NDArray[np.float64]], int],
    list[tuple[NDArray[np.float64], Mapping[str, NDArray[np.float64]], str, NDArray[np.float64]]],
]
"""Engine hook for shooting: (initial states, periods) -> per state (time, vectors, version,
final state). The runs of one call are independent and may run in parallel."""


@dataclass(frozen=True, slots=True)
class ShootingOutcome:
    """How a shooting search went.

    Attributes
    ----------
    state : array
        The periodic initial state found (or the last iterate).
    converged : bool
    iterations : int
        Newton iterations taken.
    engine_periods : int
        Single-period engine runs spent (the engine work, in period-equivalents).
    residual : float
        max_k |Phi(x)_k - x_k| / scale_k at the returned state [-].
    history : tuple of float
        The residual after each iteration.
    """

    state: NDArray[np.float64]
    converged: bool
    iterations: int
    engine_periods: int
    residual: float
    history: tuple[float, ...]


def shoot(
    run_states: RunFromStates,
    x0: NDArray[np.float64],
    *,
    scale: NDArray[np.float64],
    tolerance: float,
    max_iterations: int = 20,
) -> ShootingOutcome:
    """Find the initial state x of the storage elements for which one period maps onto itself.

    Parameters
    ----------
    run_states : callable
        The period map through the engine (see :data:`RunFromStates`).
    x0 : array
        First guess (the state at the end of a short plain transient is a good one).
    scale : array
        Typical magnitude of each state [V or A]: residuals and finite-difference steps are
        relative to it.
    tolerance : float
        Stop when the Newton step, max_k |dx_k| / scale_k, is below it: the estimated distance
        to the periodic state (not the residual |Phi(x) - x|, which understates it by
        1 / (1 - dPhi/dx) when the slowest mode decays slowly).
    max_iterations : int

    Returns
    -------
    ShootingOutcome

    Notes
    -----
    Newton's method on F(x) = Phi(x) - x, where Phi maps the state at t = 0 to the state one
    period later. From the third iteration on, an iteration that does not halve the residual
    ends the search (the caller then falls back to plain settling). The Jacobian dPhi/dx is formed by forward differences (one period run per
    state, all in one parallel batch) and afterwards updated with Broyden's rank-one formula,
    J <- J + ((dF - J dx) dx^T) / (dx^T dx); it is formed afresh when a step fails to reduce
    the residual. Steps are damped by halving (at most four times) until the residual falls.

    References
    ----------
    T. J. Aprille and T. N. Trick, "Steady-state analysis of nonlinear circuits with periodic
    inputs," Proc. IEEE 60(1), pp. 108-114, 1972 [from memory]. C. G. Broyden, "A class of
    methods for solving nonlinear simultaneous equations," Math. Comp. 19, 1965 [from memory].
    """
    x = np.asarray(x0, dtype=float).copy()
    scale = np.maximum(np.asarray(scale, dtype=float), 1e-12)
    m = x.size
    periods = 0
    history: list[float] = []

    def phi(states: Sequence[NDArray[np.float64]]) -> list[NDArray[np.float64]]:
        nonlocal periods
        periods += len(states)
        return [np.asarray(r[3], dtype=float) for r in run_states(states, 1)]

    def residual_of(f: NDArray[np.float64]) -> float:
        return float(np.max(np.abs(f) / scale))

    def jacobian(x: NDArray[np.float64], fx_phi: NDArray[np.float64]) -> NDArray[np.float64]:
        steps = 1e-6 * np.maximum(scale, np.abs(x))
        shifted = [x + steps[k] * np.eye(m)[k] for k in range(m)]
        columns = phi(shifted)
        return np.column_stack([(columns[k] - fx_phi) / steps[k] for k in range(m)])

    phi_x = phi([x])[0]
    f = phi_x - x
    r = residual_of(f)
    history.append(r)
    jac = jacobian(x, phi_x)
    iterations = 0
    distance = math.inf
    while iterations < max_iterations:
        if jac is None:
            jac = jacobian(x, phi_x)
        try:
            delta = np.linalg.solve(jac - np.eye(m), -f)
        except np.linalg.LinAlgError:
            break
        # |Phi(x) - x| understates the distance to the periodic state by 1/(1 - dPhi/dx) when
        # the slowest mode is near 1: the Newton step is the distance, so converge on it
        distance = residual_of(delta)
        if distance <= tolerance:
            break
        iterations += 1
        step = 1.0
        improved = False
        for _ in range(5):
            x_new = x + step * delta
            phi_new = phi([x_new])[0]
            f_new = phi_new - x_new
            r_new = residual_of(f_new)
            if r_new < r:
                improved = True
                break
            step *= 0.5
        if not improved:
            if jac is not None and iterations > 1:
                jac = None  # a stale Broyden Jacobian: form it afresh and try again
                continue
            break
        dx, df = x_new - x, f_new - f
        x, phi_x, f, r = x_new, phi_new, f_new, r_new
        history.append(r)
        if iterations >= 3 and r > 0.5 * history[-2]:
            break  # Newton converges fast or not at all here: stop spending engine runs
        # Broyden's update of dF/dx = J - I, kept as J (= dPhi/dx)
        jac = jac + np.outer((df + dx) - jac @ dx, dx) / float(dx @ dx)
    return ShootingOutcome(state=x, converged=distance <= tolerance, iterations=iterations,
                           engine_periods=periods, residual=r, history=tuple(history))
