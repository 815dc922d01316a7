"""Independent reference solutions for the circuits simloop simulates (tests only).

Written from first principles with numpy and scipy; it shares no code with simloop and never
imports it, so that simloop's ngspice-based harmonics can be judged against it. See README.md.
"""

from __future__ import annotations

from .rectifiers import (
    BOLTZMANN,
    CHARGE,
    GMIN_DEFAULT,
    CapacitorSolution,
    Junction,
    bridge_resistive,
    fourier_amplitudes,
    half_wave_capacitor,
    half_wave_capacitor_transient,
    half_wave_resistive,
    junction_current,
    make_junction,
    resistive_breakpoints,
    solve_loop,
    thermal_voltage,
)

__all__ = [
    "BOLTZMANN",
    "CHARGE",
    "GMIN_DEFAULT",
    "CapacitorSolution",
    "Junction",
    "bridge_resistive",
    "fourier_amplitudes",
    "half_wave_capacitor",
    "half_wave_capacitor_transient",
    "half_wave_resistive",
    "junction_current",
    "make_junction",
    "resistive_breakpoints",
    "solve_loop",
    "thermal_voltage",
]
