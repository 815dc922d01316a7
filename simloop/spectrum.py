"""The :class:`Spectrum` object: one periodic waveform in magnitude-phase form.

Convention (used everywhere in simloop)::

    f(t) = A0 + sum_{n=1..N} A_n cos(n w0 t - psi_n),   w0 = 2 pi f0

with ``A_n >= 0`` for n >= 1, ``A0`` the signed mean, and ``psi_n`` in (-pi, pi]. In terms of the
trigonometric coefficients ``f = a0 + sum a_n cos + b_n sin``: ``A_n = hypot(a_n, b_n)`` and
``psi_n = atan2(b_n, a_n)``. The one-sided complex amplitude is ``C_n = a_n - j b_n =
A_n exp(-j psi_n)``, so that ``f(t) = A0 + sum Re(C_n exp(j n w0 t))``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import InputError

#: Amplitudes below this fraction of the largest component get phase 0: their phase is noise.
PHASE_FLOOR = 1e-12


def _wrap(phase: NDArray[np.float64]) -> NDArray[np.float64]:
    """Wrap phases to (-pi, pi]."""
    wrapped = np.angle(np.exp(1j * phase))
    wrapped[np.isclose(wrapped, -np.pi, rtol=0.0, atol=1e-15)] = np.pi
    return wrapped


@dataclass(frozen=True, slots=True)
class Spectrum:
    """A periodic waveform as DC plus harmonics 1..N in magnitude-phase form.

    Parameters
    ----------
    fundamental_hz : float
        Fundamental frequency f0 [Hz].
    amplitude : array of float, length N + 1
        ``amplitude[0]`` is the mean A0 (signed) [V or A]; ``amplitude[n]`` is A_n >= 0.
    phase_rad : array of float, length N + 1
        ``phase_rad[0]`` is 0; ``phase_rad[n]`` is psi_n in (-pi, pi] [rad].

    Examples
    --------
    A 1 V cosine at 50 Hz riding on 0.5 V:

    >>> s = Spectrum.from_coefficients(50.0, a=[0.5, 1.0], b=[0.0, 0.0])
    >>> float(s.dc), float(s.amplitude[1]), s.harmonics
    (0.5, 1.0, 1)
    """

    fundamental_hz: float
    amplitude: NDArray[np.float64] = field(repr=False)
    phase_rad: NDArray[np.float64] = field(repr=False)

    def __post_init__(self) -> None:
        amp = np.array(self.amplitude, dtype=float)
        ph = np.array(self.phase_rad, dtype=float)
        if amp.ndim != 1 or amp.size < 2 or ph.shape != amp.shape:
            raise InputError(
                "spectrum needs amplitude and phase arrays of equal length N + 1 >= 2"
            )
        if not (np.isfinite(self.fundamental_hz) and self.fundamental_hz > 0):
            raise InputError(
                f"fundamental frequency must be a positive number of hertz, got {self.fundamental_hz!r}"
            )
        if not (np.all(np.isfinite(amp)) and np.all(np.isfinite(ph))):
            raise InputError("spectrum amplitudes and phases must be finite numbers")
        if np.any(amp[1:] < 0):
            raise InputError("harmonic amplitudes A_n (n >= 1) must be >= 0; put the sign in the phase")
        ph[0] = 0.0
        ph[1:] = _wrap(ph[1:])
        amp.setflags(write=False)
        ph.setflags(write=False)
        object.__setattr__(self, "fundamental_hz", float(self.fundamental_hz))
        object.__setattr__(self, "amplitude", amp)
        object.__setattr__(self, "phase_rad", ph)

    # ----------------------------------------------------------------- constructors
    @classmethod
    def from_complex(
        cls, fundamental_hz: float, dc: float, c: ArrayLike, *, floor: float = PHASE_FLOOR
    ) -> Spectrum:
        """Build from the mean and one-sided complex amplitudes ``C_n = A_n exp(-j psi_n)``.

        Parameters
        ----------
        fundamental_hz : float
            Fundamental frequency [Hz].
        dc : float
            Mean value A0.
        c : array of complex, length N
            ``c[n-1] = C_n`` for n = 1..N.
        floor : float
            Components with ``|C_n|`` below ``floor`` times the largest component get phase 0.
        """
        c = np.asarray(c, dtype=complex)
        amp = np.abs(c)
        phase = -np.angle(c)
        biggest = max(abs(float(dc)), float(amp.max(initial=0.0)))
        phase[amp <= floor * biggest] = 0.0
        return cls(
            fundamental_hz,
            np.concatenate(([float(dc)], amp)),
            np.concatenate(([0.0], phase)),
        )

    @classmethod
    def from_coefficients(
        cls, fundamental_hz: float, *, a: ArrayLike, b: ArrayLike, floor: float = PHASE_FLOOR
    ) -> Spectrum:
        """Build from trigonometric coefficients ``a[0..N]`` (a[0] = mean) and ``b[0..N]``."""
        a = np.asarray(a, dtype=float)
        b = np.asarray(b, dtype=float)
        if a.shape != b.shape or a.ndim != 1 or a.size < 2:
            raise InputError("coefficient arrays a and b must have equal length N + 1 >= 2")
        return cls.from_complex(fundamental_hz, a[0], a[1:] - 1j * b[1:], floor=floor)

    # ----------------------------------------------------------------- views
    @property
    def harmonics(self) -> int:
        """Highest harmonic order N held."""
        return self.amplitude.size - 1

    @property
    def dc(self) -> float:
        """Mean value A0."""
        return float(self.amplitude[0])

    @property
    def phase_deg(self) -> NDArray[np.float64]:
        """Phases psi_n [deg]."""
        return np.degrees(self.phase_rad)

    @property
    def frequencies_hz(self) -> NDArray[np.float64]:
        """n * f0 for n = 0..N [Hz]."""
        return np.arange(self.harmonics + 1) * self.fundamental_hz

    @property
    def complex_amplitude(self) -> NDArray[np.complex128]:
        """``C_n = A_n exp(-j psi_n)`` for n = 1..N."""
        return self.amplitude[1:] * np.exp(-1j * self.phase_rad[1:])

    def coefficients(self) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Trigonometric coefficients ``(a, b)``, each of length N + 1, a[0] = mean, b[0] = 0."""
        a = self.amplitude * np.cos(self.phase_rad)
        b = self.amplitude * np.sin(self.phase_rad)
        a[0] = self.amplitude[0]
        b[0] = 0.0
        return a, b

    @property
    def rms(self) -> float:
        """RMS of the truncated series, by Parseval: sqrt(A0^2 + sum A_n^2 / 2)."""
        return float(np.sqrt(self.amplitude[0] ** 2 + 0.5 * np.sum(self.amplitude[1:] ** 2)))

    def delayed(self, seconds: float) -> Spectrum:
        """The spectrum of ``f(t - seconds)``: psi_n grows by n w0 * seconds; amplitudes unchanged."""
        n = np.arange(self.harmonics + 1)
        shift = 2.0 * np.pi * self.fundamental_hz * float(seconds) * n
        return Spectrum(self.fundamental_hz, self.amplitude, self.phase_rad + shift)

    def truncated(self, harmonics: int) -> Spectrum:
        """The same spectrum cut to orders 0..harmonics."""
        if not 1 <= harmonics <= self.harmonics:
            raise InputError(f"can only truncate to 1..{self.harmonics} harmonics, got {harmonics}")
        return Spectrum(
            self.fundamental_hz,
            self.amplitude[: harmonics + 1],
            self.phase_rad[: harmonics + 1],
        )

    def evaluate(self, t: ArrayLike) -> NDArray[np.float64]:
        """Synthesise the truncated series at times ``t`` [s]."""
        t = np.asarray(t, dtype=float)
        n = np.arange(1, self.harmonics + 1)
        w = 2.0 * np.pi * self.fundamental_hz
        arg = np.multiply.outer(t, n * w) - self.phase_rad[1:]
        return self.amplitude[0] + np.cos(arg) @ self.amplitude[1:]

    def rows(self) -> list[dict[str, float]]:
        """One dict per order for JSON output: ``n``, ``freq_hz``, ``amplitude_v``, ``phase_deg``."""
        return [
            {
                "n": int(n),
                "freq_hz": float(f),
                "amplitude_v": float(a),
                "phase_deg": float(p),
            }
            for n, (f, a, p) in enumerate(
                zip(self.frequencies_hz, self.amplitude, self.phase_deg)
            )
        ]
