"""Which effect moved each harmonic: the circuit rebuilt one realism at a time.

Rectifiers (estimate kind ``truncated-cosine``), from the closed form to the circuit as built:

1. ``ideal``: the closed-form spectrum (ideal switch diode, no source impedance, resistive load);
2. ``constant drop``: an ideal switch with the forward drop of the diode at its peak current
   (the truncated-cosine estimate, analytic);
3. ``exponential junction``: the simulated diode with IS and N only;
4. ``+ series resistance``: and RS;
5. ``+ capacitance, recovery``: the full model (junction capacitance CJO, VJ, M; transit time TT;
   breakdown);
6. ``+ source impedance``: the source resistance as built (before: its smallest allowed value);
7. ``+ load and filter``: the reservoir capacitor as built (before: none) — the circuit as built.

Switching stages (estimate kind ``trapezoid``): ``ideal`` pulse train; ``+ on-resistance`` (no
strays); ``+ stray inductance``; ``+ stray capacitance`` (as built).

Every step after the first two is a real engine run of the same circuit with only that realism
changed. The change of each harmonic is attributed to the step that made it: in dB (where the
ideal harmonic exists) and in volts (always). Both add up exactly to the total change from
ideal to simulated, by construction (each step's change is the difference of consecutive
levels).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .errors import InputError
from .netlist import CircuitTemplate, device_models, load_circuit, model_parameters, replace_model
from .spectrum import Spectrum

_HEAVY = True  # runs the engine

#: Diode model parameters kept at each simulated rectifier step (the rest take SPICE defaults).
JUNCTION_ONLY = ("IS", "N")
WITH_RESISTANCE = ("IS", "N", "RS")


@dataclass(frozen=True, slots=True)
class Step:
    """One rung of the staircase: its name, what it adds, and the spectrum it gives."""

    name: str
    adds: str
    spectrum: Spectrum = field(repr=False)
    simulated: bool


@dataclass(frozen=True, slots=True)
class Breakdown:
    """The staircase from ideal to simulated, per harmonic."""

    circuit: str
    title: str
    probe: str
    fundamental_hz: float
    steps: tuple[Step, ...]
    parameters: Mapping[str, float]
    notes: tuple[str, ...] = ()
    result: Any = field(default=None, repr=False, compare=False)
    """The run of the circuit as built (the last step), a :class:`simloop.analyse.RunResult`."""

    @property
    def harmonics(self) -> int:
        return self.steps[-1].spectrum.harmonics

    def levels_v(self) -> np.ndarray:
        """Amplitude A_n [V] of every step (rows) and order n = 0..N (columns)."""
        return np.array([s.spectrum.amplitude[: self.harmonics + 1] for s in self.steps])

    def cumulative_db(self) -> list[list[float | None]]:
        """20 log10(A_step / A_ideal) per step and order; None where the ideal is absent."""
        levels = self.levels_v()
        ideal = np.abs(levels[0])
        floor = 1e-9 * float(np.max(ideal))
        out = []
        for row in levels:
            out.append([
                None if ideal[n] <= floor else (
                    -math.inf if row[n] == 0 else 20.0 * math.log10(abs(row[n]) / ideal[n]))
                for n in range(levels.shape[1])
            ])
        return out

    def step_db(self) -> list[list[float | None]]:
        """Change of each harmonic [dB] made by each step (first row: the ideal, all 0)."""
        cumulative = self.cumulative_db()
        out = [[0.0 if c is not None else None for c in cumulative[0]]]
        for prev, cur in zip(cumulative, cumulative[1:]):
            out.append([None if (a is None or b is None) else b - a for a, b in zip(prev, cur)])
        return out

    def step_v(self) -> list[list[float]]:
        """Change of each amplitude [V] made by each step (first row: the ideal levels)."""
        levels = self.levels_v()
        return [levels[0].tolist(), *np.diff(levels, axis=0).tolist()]

    def to_dict(self) -> dict[str, Any]:
        return {
            "circuit": self.circuit,
            "title": self.title,
            "probe": self.probe,
            "fundamental_hz": self.fundamental_hz,
            "parameters": dict(self.parameters),
            "steps": [s.name for s in self.steps],
            "adds": [s.adds for s in self.steps],
            "simulated": [s.simulated for s in self.steps],
            "harmonics": list(range(self.harmonics + 1)),
            "levels_v": self.levels_v().tolist(),
            "cumulative_db": self.cumulative_db(),
            "step_db": self.step_db(),
            "step_v": self.step_v(),
            "notes": list(self.notes),
        }


def _smallest(template: CircuitTemplate, name: str | None) -> dict[str, float]:
    if name is None:
        return {}
    spec = template.parameters[name]
    return {name: spec.min if spec.min is not None else 0.0}


def explain_circuit(
    circuit: str | CircuitTemplate,
    *,
    values: Mapping[str, float] | None = None,
    choices: Mapping[str, str] | None = None,
    settings=None,
    pool: Any = None,
) -> Breakdown:
    """Re-run the circuit adding one realism at a time and attribute each harmonic's change.

    Parameters
    ----------
    circuit : str or CircuitTemplate
        A built-in circuit or a netlist with a sidecar declaring its ``[roles]``.
    values, choices : mapping
        As for :func:`simloop.analyse.run_circuit` (the circuit as built).
    settings : simloop.analyse.RunSettings
    pool : simloop.engine.EnginePool, optional

    Returns
    -------
    Breakdown

    Raises
    ------
    InputError
        If the circuit does not declare what the breakdown needs (its estimate kind and roles).
    """
    from . import estimate as est
    from .analyse import RunSettings, ideal_parameters, resolve_amplitude, resolve_fundamental
    from .analyse import run_circuit
    from .ideal import ideal_spectrum

    settings = settings or RunSettings()
    template = circuit if isinstance(circuit, CircuitTemplate) else load_circuit(circuit)
    values = dict(values or {})
    choices = dict(choices or {})
    roles = template.roles
    if template.estimate_kind not in ("truncated-cosine", "trapezoid") or "load" not in roles:
        raise InputError(f"{template.name}: the effect breakdown needs a circuit whose metadata "
                         "declares estimate_kind and [roles] (load, ...); the built-ins do")
    rendered = template.render(values, choices)
    f0 = resolve_fundamental(template, rendered, settings.fundamental_hz)
    amplitude = resolve_amplitude(template, rendered, settings.amplitude)
    kind = settings.ideal_kind or template.ideal_kind
    if amplitude is None or kind is None:
        raise InputError(f"{template.name}: the breakdown needs the drive amplitude and an ideal kind")
    n = settings.harmonics
    ideal = ideal_spectrum(kind, harmonics=n, **ideal_parameters(
        kind, template, rendered, amplitude=amplitude, fundamental_hz=f0))
    steps = [Step("ideal", "closed form", ideal, False)]
    notes: list[str] = []

    def simulate(step_values: Mapping[str, float], transform=None):
        result = run_circuit(template, values={**values, **step_values}, choices=choices,
                             settings=settings, pool=pool, transform=transform)
        if not result.converged:
            notes.append(f"a step did not reach the steady state (drift {result.steady.drift:.1e})")
        return result

    if template.estimate_kind == "truncated-cosine":
        diodes = device_models(rendered.text, "d")
        if not diodes:
            raise InputError(f"{template.name}: no diode found for the breakdown")
        model = next(iter(diodes.values()))
        full = model_parameters(rendered.text, model)
        load = rendered.parameters[roles["load"]]
        in_path = int(roles.get("diodes_in_path", 1))
        drop, _ = est.operating_drop(amplitude, resistance=load,
                                     saturation_current=full.get("IS", 1e-14),
                                     emission=full.get("N", 1.0), diodes_in_path=in_path)
        steps.append(Step("constant drop", f"ideal switch with {drop:.3g} V drop",
                          est.resistive_rectifier(amplitude, drop, resistance=load, load=load,
                                                  harmonics=n, fundamental_hz=f0,
                                                  full_wave=kind == "full-wave",
                                                  reference=template.reference or "sine"),
                          False))
        bare = {**_smallest(template, roles.get("source_resistance")),
                **_smallest(template, roles.get("reservoir"))}

        def reduced(keep):
            subset = {k: v for k, v in full.items() if k in keep}
            return lambda text: replace_model(text, model, subset)

        for name, adds, step_values, transform in (
            ("exponential junction", "Shockley junction (IS, N)", bare, reduced(JUNCTION_ONLY)),
            ("+ series resistance", f"RS = {full.get('RS', 0.0):.3g} ohm", bare,
             reduced(WITH_RESISTANCE)),
            ("+ capacitance, recovery", "CJO, VJ, M, TT, BV of the model", bare, None),
            ("+ source impedance", "source resistance as built",
             _smallest(template, roles.get("reservoir")), None),
            ("+ load and filter", "reservoir capacitor as built", {}, None),
        ):
            result = simulate(step_values, transform)
            steps.append(Step(name, adds, result.simulated, True))
            last = result
    else:
        lpar, cpar = roles.get("stray_inductance"), roles.get("stray_capacitance")
        stray_off = {**_smallest(template, lpar), **_smallest(template, cpar)}
        for name, adds, step_values in (
            ("+ on-resistance", "switch on-resistance, no strays", stray_off),
            ("+ stray inductance", "stray inductance as built", _smallest(template, cpar)),
            ("+ stray capacitance", "stray capacitance as built", {}),
        ):
            result = simulate(step_values)
            steps.append(Step(name, adds, result.simulated, True))
            last = result
    return Breakdown(circuit=template.name, title=template.title, probe=last.probe,
                     fundamental_hz=f0, steps=tuple(steps), parameters=dict(last.parameters),
                     notes=tuple(dict.fromkeys(notes)), result=last)


def present_orders(breakdown: Breakdown, count: int = 5) -> tuple[int, ...]:
    """The first ``count`` orders whose ideal harmonic exists (a staircase from zero says nothing)."""
    ideal = np.abs(breakdown.levels_v()[0])
    present = [n for n in range(ideal.size) if ideal[n] > 1e-9 * ideal.max()]
    return tuple(present[:count])


def breakdown_figure(breakdown: Breakdown, *, orders: tuple[int, ...] | None = None):
    """Per harmonic, the steps as a staircase of levels in dBV from ideal to simulated."""
    from .fourier import dbv
    from .plots import _pyplot

    plt = _pyplot()
    if orders is None:
        orders = present_orders(breakdown)
    orders = tuple(o for o in orders if o <= breakdown.harmonics)
    fig, axes = plt.subplots(1, len(orders), figsize=(3.2 * len(orders), 4.6),
                             constrained_layout=True, squeeze=False)
    levels = breakdown.levels_v()
    names = [s.name for s in breakdown.steps]
    x = np.arange(len(names))
    for ax, n in zip(axes[0], orders):
        with np.errstate(divide="ignore"):
            y = dbv(np.abs(levels[:, n]), dc=(n == 0))
        finite = np.isfinite(y)
        floor = (np.min(y[finite]) - 6.0) if finite.any() else -120.0
        y_shown = np.where(finite, y, floor)
        ax.step(x, y_shown, where="mid", color="#0072b2", linewidth=1.8)
        ax.plot(x, y_shown, "o", color="#0072b2", markersize=4)
        for k in range(1, len(x)):
            if finite[k] and finite[k - 1] and abs(y[k] - y[k - 1]) >= 0.05:
                ax.annotate(f"{y[k] - y[k - 1]:+.2f}", (x[k], y[k]), textcoords="offset points",
                            xytext=(0, 6), ha="center", fontsize=7, color="#555555")
        ax.set_xticks(x, names, rotation=60, ha="right", fontsize=7)
        ax.set_title(f"n = {n}" + (" (DC)" if n == 0 else ""), fontsize=9)
        ax.grid(True, alpha=0.3)
    axes[0][0].set_ylabel("level [dBV, re 1 V rms]")
    fig.suptitle(f"{breakdown.circuit}: which effect moved each harmonic "
                 f"(labels: change in dB made by the step)", fontsize=10)
    return fig
