"""Harmonic by harmonic: ideal vs drop-corrected estimate vs simulated.

Pure functions on :class:`~simloop.spectrum.Spectrum` objects; nothing here knows of SPICE.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .spectrum import Spectrum

#: Below this fraction of the largest ideal component an ideal harmonic counts as absent: its
#: delta in dB is undefined (reported as None) rather than a huge number.
ABSENT = 1e-9


@dataclass(frozen=True, slots=True)
class HarmonicRow:
    """One harmonic order, side by side. Amplitudes are peak values [V or A], phases [deg]."""

    n: int
    freq_hz: float
    ideal_v: float | None
    ideal_phase_deg: float | None
    estimate_v: float | None
    sim_v: float
    sim_phase_deg: float
    delta_db: float | None
    """20 log10(sim / ideal); None where the ideal harmonic is absent (below ABSENT)."""
    estimate_delta_db: float | None
    """20 log10(sim / estimate); None where there is no estimate or it is absent."""

    def as_dict(self) -> dict[str, float | int | None]:
        return {
            "n": self.n,
            "freq_hz": self.freq_hz,
            "ideal_v": self.ideal_v,
            "ideal_phase_deg": self.ideal_phase_deg,
            "estimate_v": self.estimate_v,
            "sim_v": self.sim_v,
            "sim_phase_deg": self.sim_phase_deg,
            "delta_db": self.delta_db,
            "estimate_delta_db": self.estimate_delta_db,
        }


def _ratio_db(num: float, den: float, floor: float) -> float | None:
    if abs(den) <= floor or den == 0.0:
        return None
    if num == 0.0:
        return -math.inf
    return 20.0 * math.log10(abs(num) / abs(den))


def compare_spectra(
    simulated: Spectrum, *, ideal: Spectrum | None, estimate: Spectrum | None = None
) -> tuple[HarmonicRow, ...]:
    """Rows n = 0..N setting the simulated spectrum beside the ideal one and the estimate.

    Parameters
    ----------
    simulated : Spectrum
        From the engine's steady state.
    ideal : Spectrum or None
        The closed form with the same fundamental and at least as many harmonics (None: the
        circuit has no ideal counterpart; its columns are None).
    estimate : Spectrum or None
        The drop-corrected estimate, if the circuit has one.

    Raises
    ------
    InputError
        If the fundamentals differ or a reference has fewer harmonics than the simulated one.

    Examples
    --------
    A simulated 2nd harmonic 1 dB under its ideal value:

    >>> ideal = Spectrum(50.0, [1.0, 0.5, 0.2], [0, 0, 0])
    >>> sim = Spectrum(50.0, [0.9, 0.45, 0.2 * 10 ** (-1 / 20)], [0, 0, 0])
    >>> round(compare_spectra(sim, ideal=ideal)[2].delta_db, 6)
    -1.0
    """
    n_max = simulated.harmonics
    for name, ref in (("ideal", ideal), ("estimate", estimate)):
        if ref is None:
            continue
        if not math.isclose(ref.fundamental_hz, simulated.fundamental_hz, rel_tol=1e-12):
            raise InputError(
                f"{name} spectrum is at {ref.fundamental_hz:g} Hz but the simulated one at "
                f"{simulated.fundamental_hz:g} Hz; give the same fundamental"
            )
        if ref.harmonics < n_max:
            raise InputError(f"{name} spectrum holds {ref.harmonics} harmonics, {n_max} needed")
    floor = ABSENT * float(np.max(np.abs(ideal.amplitude[: n_max + 1]))) if ideal else 0.0
    est_floor = (
        ABSENT * float(np.max(np.abs(estimate.amplitude[: n_max + 1]))) if estimate else 0.0
    )
    rows = []
    for n in range(n_max + 1):
        sim_v = float(simulated.amplitude[n])
        ideal_v = float(ideal.amplitude[n]) if ideal is not None else None
        est_v = float(estimate.amplitude[n]) if estimate is not None else None
        rows.append(
            HarmonicRow(
                n=n,
                freq_hz=n * simulated.fundamental_hz,
                ideal_v=ideal_v,
                ideal_phase_deg=float(ideal.phase_deg[n]) if ideal is not None else None,
                estimate_v=est_v,
                sim_v=sim_v,
                sim_phase_deg=float(simulated.phase_deg[n]),
                delta_db=None if ideal_v is None else _ratio_db(sim_v, ideal_v, floor),
                estimate_delta_db=None if est_v is None else _ratio_db(sim_v, est_v, est_floor),
            )
        )
    return tuple(rows)


def harmonic_powers(spectrum: Spectrum, *, load_ohm: float) -> np.ndarray:
    """Power of each component of a load voltage in a resistive load [W]: A0^2/R, A_n^2/(2R)."""
    if not load_ohm > 0:
        raise InputError(f"load resistance must be > 0 ohm, got {load_ohm!r}")
    p = spectrum.amplitude**2 / (2.0 * load_ohm)
    p[0] = spectrum.amplitude[0] ** 2 / load_ohm
    return p


def conversion_efficiency(spectrum: Spectrum, *, load_ohm: float, source_power_w: float) -> np.ndarray:
    """Load power at each order n over the average power the source delivers [-], n = 0..N."""
    if not source_power_w > 0:
        raise InputError("source power must be > 0 W to form a conversion efficiency")
    return harmonic_powers(spectrum, load_ohm=load_ohm) / source_power_w


def conduction_angle_deg(
    time: np.ndarray, current: np.ndarray, *, fundamental_hz: float, threshold: float = 1e-3
) -> float:
    """Conduction angle measured from a diode current over whole periods [deg].

    The diode counts as conducting where its current exceeds ``threshold`` times its peak
    (a Shockley diode never quite stops conducting, so some threshold is needed; 1e-3 of the
    peak marks the knee well at practical drive levels). The conducting time is integrated on
    the native time points, crossing instants found by linear interpolation.
    """
    period = 1.0 / fundamental_hz
    span = time[-1] - time[0]
    periods = math.floor(span / period + 1e-9)
    if periods < 1:
        raise InputError("conduction angle needs at least one whole period of diode current")
    t0 = time[-1] - periods * period
    mask = time >= t0 - 1e-12 * period
    t, i = time[mask], current[mask]
    peak = float(np.max(i))
    if peak <= 0:
        return 0.0
    s = i - threshold * peak
    a, b = s[:-1], s[1:]
    dt = np.diff(t)
    both = (a >= 0) & (b >= 0)
    cross = (a >= 0) != (b >= 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(cross, a / (a - b), 0.0)
    partial = np.where(a >= 0, frac, 1.0 - frac)
    on = float(np.sum(dt[both]) + np.sum(dt[cross] * partial[cross]))
    return 360.0 * on / (periods * period)
