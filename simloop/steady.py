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
    """

    tolerance: float = 1e-6
    first_periods: int = 12
    max_periods: int = 2000
    tmax: float | None = None
    timeout: float = 120.0

    def __post_init__(self) -> None:
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
    (k = ``every``) give two changes d0 = X_{P-k} - X_{P-2k} and d1 = X_P - X_{P-k} (largest
    component of each, relative to the largest amplitude). The residual is |d1|. Settling is
    geometric near the steady state, so with r = |d1| / |d0| < 1 (the decay over k periods)
    the change still to come is |d1| r / (1 - r). Where r >= 1 the waveform is not (yet)
    settling and the drift is infinite, unless |d1| is already below ``noise``
    (:data:`NOISE_FRACTION` of the tolerance): there the changes are the engine's
    step-to-step noise rather than settling.
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
        d0 = float(np.max(np.abs(c[1] - c[0]))) / scale
        d1 = float(np.max(np.abs(c[2] - c[1]))) / scale
        residual = max(residual, d1)
        if d1 <= noise:
            tail = d1
        elif d0 > 0 and d1 < d0:
            rho = d1 / d0
            tail = d1 * rho / (1.0 - rho)
            slowest = max(slowest, rho ** (1.0 / every))
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
                                     noise=NOISE_FRACTION * settings.tolerance, every=every)
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
