"""Vocabularies used across simloop, in one place.

Each vocabulary is a ``Literal`` type plus a tuple of its values (for argument parsers and
validation). Display-unit factors live here too.
"""

from __future__ import annotations

from typing import Literal, get_args

WaveformKind = Literal[
    "half-wave", "full-wave", "pulse", "square", "truncated-cosine", "trapezoid"
]
WAVEFORM_KINDS: tuple[str, ...] = get_args(WaveformKind)

TimeReference = Literal["cosine", "sine"]
"""Where t = 0 sits: ``cosine`` puts the drive's positive peak at t = 0 (drive A cos wt);
``sine`` puts its rising zero crossing there (drive A sin wt, as a SPICE SIN source)."""
TIME_REFERENCES: tuple[str, ...] = get_args(TimeReference)

ResampleMethod = Literal["spline", "linear"]
"""How non-uniform samples become a continuous period before integration: ``spline`` (cubic,
default) or ``linear`` (kept for comparisons; about 25x less accurate on engine output)."""
RESAMPLE_METHODS: tuple[str, ...] = get_args(ResampleMethod)

SteadyMethod = Literal["auto", "settle", "shoot"]
"""How the periodic steady state is found (see :class:`simloop.steady.SteadySettings`)."""
STEADY_METHODS: tuple[str, ...] = get_args(SteadyMethod)

ProbeKind = Literal["voltage", "differential", "current"]
PROBE_KINDS: tuple[str, ...] = get_args(ProbeKind)

ExecutorKind = Literal["local", "dask"]
EXECUTOR_KINDS: tuple[str, ...] = get_args(ExecutorKind)

#: Display factors: value_in_display_unit = value_si * factor.
DISPLAY_FACTORS: dict[str, float] = {
    "V": 1.0,
    "mV": 1e3,
    "uV": 1e6,
    "A": 1.0,
    "mA": 1e3,
    "uA": 1e6,
    "Hz": 1.0,
    "kHz": 1e-3,
    "MHz": 1e-6,
    "s": 1.0,
    "ms": 1e3,
    "us": 1e6,
    "ns": 1e9,
}
