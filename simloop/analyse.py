"""One circuit, end to end: render, simulate to periodic steady state, decompose, compare.

This is the orchestrator behind ``simloop run`` (and each point of a sweep). It wires the
modules together and knows no file formats: the command line writes the outputs.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .compare import HarmonicRow, compare_spectra, conduction_angle_deg, conversion_efficiency
from .errors import InputError
from .fourier import spectrum_from_samples, thd, thd_rms, waveform_metrics
from .netlist import CircuitTemplate, RenderedCircuit, StorageElement, device_models
from .netlist import element_nodes, load_circuit, model_parameters, storage_elements
from .netlist import with_initial_conditions
from .probe import Probe, parse_probe
from .spectrum import Spectrum
from .steady import NOISE_FRACTION, SteadySettings, SteadyState, default_tmax, judge, settle
from .steady import shoot
from .vocab import WAVEFORM_KINDS, ResampleMethod

_HEAVY = True  # runs the engine (PySpice in worker processes) when called


@dataclass(frozen=True, slots=True)
class RunSettings:
    """What to simulate and how.

    Parameters
    ----------
    harmonics : int
        Highest harmonic order N, 1..1000.
    probe : str or None
        Probe name or expression (``v(out)``, ``v(a,b)``, ``i(V1)``); None: the circuit's own.
    fundamental_hz, amplitude : float or None
        Overrides of the fundamental [Hz] and the drive amplitude [V] used for the ideal.
    ideal_kind : str or None
        Override of the ideal counterpart (:data:`simloop.vocab.WAVEFORM_KINDS`).
    steady : SteadySettings
    method : {"spline", "linear"}
        Resampling of the engine's points before the Fourier integral.
    mains_class : {"A", "D"} or None
        Check the source current's harmonics against IEC 61000-3-2 Class A or D (values as
        reproduced in secondary sources; see :mod:`simloop.mains`).
    mains_power_w : float or None
        Active input power for the Class D limits [W]; None: computed from the spectra.
    """

    harmonics: int = 10
    probe: str | None = None
    fundamental_hz: float | None = None
    amplitude: float | None = None
    ideal_kind: str | None = None
    steady: SteadySettings = field(default_factory=SteadySettings)
    method: ResampleMethod = "spline"
    mains_class: str | None = None
    mains_power_w: float | None = None

    def __post_init__(self) -> None:
        if (not isinstance(self.harmonics, int) or isinstance(self.harmonics, bool)
                or not 1 <= self.harmonics <= 1000):
            raise InputError(f"harmonics must be a whole number 1..1000, got {self.harmonics!r}")
        for name in ("fundamental_hz", "amplitude"):
            value = getattr(self, name)
            if value is not None and (isinstance(value, bool) or not isinstance(value, (int, float))
                                      or not (math.isfinite(value) and value > 0)):
                raise InputError(f"{name} must be a positive finite number, got {value!r}")
        if self.mains_class is not None and self.mains_class not in ("A", "D"):
            raise InputError(f"mains class {self.mains_class!r} is unknown; use A or D")
        if self.ideal_kind is not None and self.ideal_kind not in WAVEFORM_KINDS:
            raise InputError(
                f"ideal kind {self.ideal_kind!r} is unknown; use one of {', '.join(WAVEFORM_KINDS)}"
            )


@dataclass(frozen=True, slots=True)
class RunResult:
    """Everything one run found. ``to_dict()`` gives the JSON document of ``simloop run``."""

    circuit: str
    title: str
    parameters: Mapping[str, float]
    choices: Mapping[str, str]
    probe: str
    fundamental_hz: float
    amplitude: float | None
    ideal_kind: str | None
    estimate_kind: str | None
    engine_version: str
    steady: SteadyState = field(repr=False)
    metrics: Mapping[str, Any]
    rows: tuple[HarmonicRow, ...] = field(repr=False)
    simulated: Spectrum = field(repr=False)
    ideal: Spectrum | None = field(repr=False)
    estimate: Spectrum | None = field(repr=False)
    period_time: NDArray[np.float64] = field(repr=False)
    period_wave: NDArray[np.float64] = field(repr=False)
    ideal_parameters: Mapping[str, Any] = field(default_factory=dict, repr=False)
    notes: tuple[str, ...] = ()
    settings: RunSettings = field(default_factory=RunSettings, repr=False)

    @property
    def converged(self) -> bool:
        return self.steady.converged

    def to_dict(self) -> dict[str, Any]:
        name, _, version = self.engine_version.partition("-")
        return {
            "circuit": self.circuit,
            "title": self.title,
            "parameters": dict(self.parameters),
            "choices": dict(self.choices),
            "probe": self.probe,
            "fundamental_hz": self.fundamental_hz,
            "amplitude_v": self.amplitude,
            "ideal_kind": self.ideal_kind,
            "estimate_kind": self.estimate_kind,
            "engine": {"name": name or "ngspice", "version": version or self.engine_version},
            "settings": {
                "harmonics": self.settings.harmonics,
                "tolerance": self.settings.steady.tolerance,
                "max_periods": self.settings.steady.max_periods,
                "resampling": self.settings.method,
            },
            "steady_state": self.steady.figures(),
            "metrics": dict(self.metrics),
            "harmonics": [row.as_dict() for row in self.rows],
            "notes": list(self.notes),
        }


# ---------------------------------------------------------------------------- pieces
def resolve_fundamental(template: CircuitTemplate, rendered: RenderedCircuit,
                        override: float | None) -> float:
    if override is not None:
        return float(override)
    if template.fundamental_param is not None:
        return float(rendered.parameters[template.fundamental_param])
    drive = rendered.drive
    if drive is not None:
        freq = drive.frequency if drive.kind == "sin" else (1.0 / drive.period if drive.period else None)
        if freq:
            return float(freq)
    raise InputError(
        f"{template.name}: cannot tell the fundamental; give --fundamental HZ"
    )


def resolve_amplitude(template: CircuitTemplate, rendered: RenderedCircuit,
                      override: float | None) -> float | None:
    if override is not None:
        return float(override)
    if template.amplitude_param is not None:
        return float(rendered.parameters[template.amplitude_param])
    drive = rendered.drive
    if drive is None:
        return None
    if drive.kind == "sin":
        return float(drive.amplitude)
    return float(abs(drive.v2 - drive.v1)) if drive.v1 is not None else None


def _role(template: CircuitTemplate, rendered: RenderedCircuit, role: str) -> float | None:
    name = template.roles.get(role)
    return None if name is None else float(rendered.parameters[name])


def ideal_parameters(kind: str, template: CircuitTemplate, rendered: RenderedCircuit, *,
                     amplitude: float, fundamental_hz: float) -> dict[str, Any]:
    """Keyword parameters of :func:`simloop.ideal.ideal_spectrum` for this circuit."""
    reference = template.reference or ("sine" if rendered.drive and rendered.drive.kind == "sin" else "cosine")
    params: dict[str, Any] = {"fundamental_hz": fundamental_hz}
    if kind in ("half-wave", "full-wave"):
        params.update(amplitude=amplitude, reference=reference)
        return params
    duty = _role(template, rendered, "duty")
    drive = rendered.drive
    if duty is None and drive is not None and drive.kind == "pulse":
        duty = drive.duty
    if kind == "square":
        duty = 0.5
    if kind in ("pulse", "square", "trapezoid") and duty is None:
        raise InputError(f"{template.name}: the {kind} ideal needs a duty cycle; give a PULSE source")
    centre = drive.time_origin if drive is not None and drive.kind == "pulse" else 0.0
    period = 1.0 / fundamental_hz
    delay = (centre - duty * period / 2.0) % period if duty is not None else 0.0
    if kind == "pulse":
        params.update(amplitude=amplitude, duty=duty, delay=delay)
    elif kind == "square":
        params.update(amplitude=amplitude, delay=delay)
    elif kind == "trapezoid":
        rise = drive.rise if drive is not None and drive.rise else 0.0
        fall = drive.fall if drive is not None and drive.fall else 0.0
        params.update(amplitude=amplitude, width=duty * period, rise=rise, fall=fall,
                      delay=(delay - rise / 2.0) % period)
    elif kind == "truncated-cosine":
        raise InputError("truncated-cosine is an estimate, not an ideal counterpart; use --ideal half-wave")
    return params


def drop_corrected_estimate(template: CircuitTemplate, rendered: RenderedCircuit, *,
                            amplitude: float, fundamental_hz: float, harmonics: int,
                            ideal_kind: str | None) -> tuple[Spectrum | None, dict[str, float]]:
    """The estimate for rectifiers (truncated cosine / reservoir) and switching stages (trapezoid).

    Returns the spectrum (None where the circuit does not declare what the estimate needs) and
    the figures it used (``drop_v``, ``peak_current_a``, ...).
    """
    from . import estimate as est
    from .ideal import trapezoid_pulse

    kind = template.estimate_kind
    load = _role(template, rendered, "load")
    if kind is None or load is None:
        return None, {}
    if kind == "truncated-cosine":
        diodes = device_models(rendered.text, "d")
        if not diodes:
            return None, {}
        model = model_parameters(rendered.text, next(iter(diodes.values())))
        is_, n_e, rs_d = model.get("IS", 1e-14), model.get("N", 1.0), model.get("RS", 0.0)
        in_path = int(template.roles.get("diodes_in_path", 1))
        r_src = (_role(template, rendered, "source_resistance") or 0.0) + in_path * rs_d
        full = ideal_kind == "full-wave"
        reference = template.reference or "sine"
        drop, peak = est.operating_drop(amplitude, resistance=r_src + load, saturation_current=is_,
                                        emission=n_e, diodes_in_path=in_path)
        cres = _role(template, rendered, "reservoir") or 0.0
        if cres > 0 and r_src > 0:
            for _ in range(3):  # the peak current sets the drop, the drop the peak current
                spec, peak = est.reservoir_rectifier(
                    amplitude, drop, source_resistance=r_src, load=load, capacitance=cres,
                    harmonics=harmonics, fundamental_hz=fundamental_hz, full_wave=full,
                    reference=reference)
                drop = in_path * est.junction_drop(peak, saturation_current=is_, emission=n_e)
            spec, peak = est.reservoir_rectifier(
                amplitude, drop, source_resistance=r_src, load=load, capacitance=cres,
                harmonics=harmonics, fundamental_hz=fundamental_hz, full_wave=full,
                reference=reference)
        else:
            spec = est.resistive_rectifier(amplitude, drop, resistance=r_src + load, load=load,
                                           harmonics=harmonics, fundamental_hz=fundamental_hz,
                                           full_wave=full, reference=reference)
        return spec, {"drop_v": drop, "peak_current_a": peak}
    if kind == "trapezoid":
        ron = _role(template, rendered, "on_resistance") or 0.0
        lpar = _role(template, rendered, "stray_inductance") or 0.0
        cpar = _role(template, rendered, "stray_capacitance") or 0.0
        params = ideal_parameters("pulse", template, rendered, amplitude=amplitude,
                                  fundamental_hz=fundamental_hz)
        period = 1.0 / fundamental_hz
        level = amplitude * load / (load + ron)
        # First-order edges: turn-on through L/(R_L + R_on), turn-off through R_L C + L/R_L;
        # an exponential edge's 10-90 % time is 2.2 tau, a linear ramp's is 0.8 of its length.
        rise = 2.2 / 0.8 * lpar / (load + ron)
        fall = 2.2 / 0.8 * (load * cpar + lpar / load)
        width = params["duty"] * period + (fall - rise) / 2.0
        if rise + fall >= period or width <= (rise + fall) / 2.0:
            return None, {}
        spec = trapezoid_pulse(level, width, rise=rise, fall=fall, harmonics=harmonics,
                               fundamental_hz=fundamental_hz, delay=params["delay"])
        return spec, {"level_v": level, "rise_s": rise, "fall_s": fall}
    return None, {}


def _source_power(template: CircuitTemplate, rendered: RenderedCircuit, time, vectors,
                  fundamental_hz: float) -> float | None:
    source = template.roles.get("power_source")
    if source is None:
        return None
    plus, minus = element_nodes(rendered.text, str(source))
    v = parse_probe(f"v({plus},{minus})" if minus != "0" else f"v({plus})").evaluate(vectors)
    i = vectors[f"{source}#branch"]
    period = 1.0 / fundamental_hz
    mask = time >= time[-1] - period * (1 + 1e-12)
    # SPICE's branch current flows into the + terminal, so delivered power is -v i.
    return float(-np.trapezoid(v[mask] * i[mask], time[mask]) / (time[mask][-1] - time[mask][0]))


def _source_spectra(template, rendered, time, vectors, f0, harmonics, method):
    """(voltage, line current) spectra at the power source; the current drawn from it."""
    source = template.roles.get("power_source")
    if source is None:
        return None
    plus, minus = element_nodes(rendered.text, str(source))
    v = parse_probe(f"v({plus},{minus})" if minus != "0" else f"v({plus})").evaluate(vectors)
    i = -vectors[f"{source}#branch"]  # SPICE's branch current flows into the + terminal
    args = dict(fundamental_hz=f0, harmonics=harmonics, periods=1, method=method)
    return spectrum_from_samples(time, v, **args), spectrum_from_samples(time, i, **args)


def _page_check(template, rendered, time, vectors, f0, harmonics, method, simulated, load):
    """Page's bound for a single-diode circuit: power into the diode at f0 vs load power at n."""
    from .bounds import conversion_to_harmonics
    from .compare import harmonic_powers

    diodes = device_models(rendered.text, "d")
    if len(diodes) != 1 or len(template.conduction_probes) != 1 or load is None:
        return None
    anode, cathode = element_nodes(rendered.text, next(iter(diodes)))
    volts = parse_probe(f"v({anode},{cathode})" if cathode != "0" else f"v({anode})")
    if not all(name in vectors for name in (anode, cathode) if name != "0"):
        return None
    args = dict(fundamental_hz=f0, harmonics=harmonics, periods=1, method=method)
    v_d = spectrum_from_samples(time, volts.evaluate(vectors), **args)
    i_d = spectrum_from_samples(time, template.conduction_probes[0].evaluate(vectors), **args)
    try:
        return conversion_to_harmonics(element_voltage=v_d, element_current=i_d,
                                       load_power_w=harmonic_powers(simulated, load_ohm=load))
    except InputError:
        return None


def _power_probes(template: CircuitTemplate, rendered: RenderedCircuit) -> tuple[str, ...]:
    source = template.roles.get("power_source")
    if source is None:
        return ()
    plus, minus = element_nodes(rendered.text, str(source))
    saves = [f"i({source})"] + [f"v({n})" for n in (plus, minus) if n != "0"]
    return tuple(saves)


def _has_fundamental(spectrum: Spectrum) -> bool:
    """True unless the fundamental is below 1e-6 of the largest component (a full-wave output)."""
    return bool(spectrum.amplitude[1] > 1e-6 * np.max(np.abs(spectrum.amplitude)))


def _states(rendered: RenderedCircuit) -> tuple[StorageElement, ...]:
    """Capacitors and inductors whose value is not a plain zero (a zero one holds no state)."""
    from .units import parse_number

    kept = []
    for element in storage_elements(rendered.text):
        raw = element.value.strip("{}").strip().lower()
        value = rendered.parameters.get(raw)
        if value is None:
            try:
                value = parse_number(raw)
            except InputError:
                value = None  # an expression: keep it
        if value != 0.0:
            kept.append(element)
    return tuple(kept)


def bounded(settings: SteadySettings, *, period: float, tmax: float,
            vectors: int) -> tuple[SteadySettings, str | None]:
    """Apply the resource bounds: refuse what cannot fit, cap ``max_periods`` to what can.

    One run of P periods takes P T / TMAX engine steps and hands back about that many points of
    each saved vector (8 bytes each). A first attempt that does not fit is refused.
    """
    from dataclasses import replace

    steps_per_period = period / tmax
    bytes_per_period = steps_per_period * vectors * 8.0
    fit = min(settings.max_points / steps_per_period,
              settings.max_output_bytes / bytes_per_period)
    if fit < settings.first_periods:
        raise InputError(
            f"the engine would take {steps_per_period:.3g} steps per period (TMAX {tmax:.3g} s "
            f"for a {period:.3g} s period), over the bound of {settings.max_points:.3g} steps or "
            f"{settings.max_output_bytes / 2**20:.0f} MiB per run for {settings.first_periods} "
            "periods; raise --tmax, lower --harmonics or raise the bound (--max-steps, --max-output)")
    if fit < settings.max_periods:
        capped = int(fit)
        return (replace(settings, max_periods=capped),
                f"max periods capped at {capped} by the bound of {settings.max_points:.3g} engine "
                "steps per run")
    return settings, None


def find_steady_state(run_periods, run_states, storage, *, fundamental_hz: float, watch,
                      settings: SteadySettings, tmax: float, harmonics: int) -> SteadyState:
    """Settle, and where the first attempt is not enough, shoot (then verify, or fall back).

    ``auto`` does not shoot circuits with coupled inductors: setting the winding currents one at
    a time excites the leakage inductances, which makes each period run slow and Newton's
    method unreliable (measured on the centre-tap rectifier with a reservoir: 5 iterations,
    no convergence, 5x the time of plain settling). ``shoot`` tries anyway.
    """
    from dataclasses import replace

    coupled = any(e.kind == "L" and e.coupled for e in storage)
    if not storage:  # no slow state: a change that does not decay is the engine's noise
        return settle(run_periods, fundamental_hz=fundamental_hz, watch=watch, settings=settings,
                      tmax=tmax, harmonics=harmonics, noise_fraction=1.0)
    if settings.method == "settle" or (settings.method == "auto" and coupled):
        return settle(run_periods, fundamental_hz=fundamental_hz, watch=watch, settings=settings,
                      tmax=tmax, harmonics=harmonics)
    if settings.method == "shoot":  # a short run only for the first guess, then shoot
        first = settle(run_periods, fundamental_hz=fundamental_hz, watch=watch,
                       settings=replace(settings, first_periods=4, max_periods=4),
                       tmax=tmax, harmonics=harmonics)
    else:
        first = settle(run_periods, fundamental_hz=fundamental_hz, watch=watch,
                       settings=replace(settings, max_periods=settings.first_periods),
                       tmax=tmax, harmonics=harmonics)
        if first.converged:
            return first
    period = 1.0 / fundamental_hz
    traces = [e.read(first.vectors) for e in storage]
    x0 = np.array([float(np.asarray(tr)[-1]) for tr in traces])
    scale = np.array([float(np.max(np.abs(tr))) for tr in traces])
    scale = np.maximum(scale, 1e-9 * max(float(scale.max()), 1e-30))
    outcome = shoot(run_states, x0, scale=scale, tolerance=settings.tolerance)
    engine_periods = first.engine_periods + outcome.engine_periods
    why = f"residual {outcome.residual:.1e} after {outcome.iterations} iterations"
    if outcome.converged:
        check = 3
        ((time, vectors, version, _),) = run_states([outcome.state], check)
        engine_periods += check
        residual, drift, _ = judge(time, watch(vectors), period=period, end=time[-1],
                                   harmonics=harmonics, noise=NOISE_FRACTION * settings.tolerance)
        if drift <= settings.tolerance:
            return SteadyState(
                time=time, vectors=vectors, periods_simulated=check,
                engine_periods=engine_periods, converged=True, residual=residual, drift=drift,
                tmax=tmax, engine_version=version, attempts=first.attempts + 1,
                method="shooting", iterations=outcome.iterations,
                shooting_residual=outcome.residual)
        why = f"its periodic state did not verify (change still to come {drift:.1e})"
    fallback = settle(run_periods, fundamental_hz=fundamental_hz, watch=watch,
                      settings=replace(settings, first_periods=min(4 * settings.first_periods,
                                                                   settings.max_periods)),
                      tmax=tmax, harmonics=harmonics)
    return replace(fallback, engine_periods=fallback.engine_periods + engine_periods,
                   iterations=outcome.iterations, shooting_residual=outcome.residual,
                   fallback=f"shooting did not converge ({why}); settled by plain simulation")


# ---------------------------------------------------------------------------- the run
def run_circuit(
    circuit: str | CircuitTemplate,
    *,
    values: Mapping[str, float] | None = None,
    choices: Mapping[str, str] | None = None,
    settings: RunSettings | None = None,
    pool: Any = None,
    transform: Any = None,
) -> RunResult:
    """Simulate one circuit to its periodic steady state and compare its harmonics with theory.

    Parameters
    ----------
    circuit : str or CircuitTemplate
        Built-in name, netlist path, or a loaded template.
    values : mapping
        Parameter values overriding the defaults (``{"rload": 1e3}``).
    choices : mapping
        Model choices (``{"diode": "sl_schottky"}``).
    settings : RunSettings
    pool : simloop.engine.EnginePool, optional
        Engine workers to use; a private one-worker pool otherwise.
    transform : callable, optional
        ``str -> str`` applied to the rendered text before the engine sees it (simloop's own
        variants, e.g. a reduced diode model for the effect breakdown; never user input).

    Returns
    -------
    RunResult
        Check ``converged``: an unconverged result is returned (nothing computed is lost) but
        its spectrum is not a steady-state one.

    Raises
    ------
    InputError, NetlistRefused
        Before the engine runs, for bad circuits, values, probes and settings.
    SimulationError
        When the engine fails.
    """
    from .engine import TransientRequest, run_transient, shared_pool

    settings = settings or RunSettings()
    template = circuit if isinstance(circuit, CircuitTemplate) else load_circuit(circuit)
    rendered = template.render(values or {}, choices or {})
    if transform is not None:
        from dataclasses import replace

        rendered = replace(rendered, text=transform(rendered.text))
    f0 = resolve_fundamental(template, rendered, settings.fundamental_hz)
    if not (math.isfinite(f0) and 1e-3 <= f0 <= 1e11):
        raise InputError(f"{template.name}: fundamental {f0:g} Hz is outside 1 mHz .. 100 GHz; "
                         "check the SIN frequency or PULSE period, or give --fundamental HZ")
    amplitude = resolve_amplitude(template, rendered, settings.amplitude)
    probe: Probe | None = template.probe(settings.probe) if settings.probe else template.default_probe
    if probe is None:
        raise InputError(f"{template.name}: no default probe; give --probe, e.g. --probe 'v(out)'")
    ideal_kind = settings.ideal_kind or template.ideal_kind
    harmonics = settings.harmonics
    conduction = tuple(template.conduction_probes)
    storage = _states(rendered)
    diode_nodes: set[str] = set()
    single = device_models(rendered.text, "d")
    if len(single) == 1:
        diode_nodes = {f"v({n})" for n in element_nodes(rendered.text, next(iter(single))) if n != "0"}
    saves = sorted({*probe.save_vectors(), *(s for p in conduction for s in p.save_vectors()),
                    *_power_probes(template, rendered), *diode_nodes,
                    *(s for e in storage for s in e.save_vectors())})
    tmax = settings.steady.tmax or default_tmax(f0, harmonics)
    period = 1.0 / f0
    params = tuple(sorted(rendered.parameters.items()))
    steady_settings, bound_note = bounded(settings.steady, period=period, tmax=tmax,
                                          vectors=len(saves) + 1)

    def run_periods(periods: int, tstart: float):
        trace = run_transient(
            TransientRequest(
                netlist=rendered.text, stop=periods * period, step=tmax, tmax=tmax,
                start=tstart, save=tuple(saves), timeout=settings.steady.timeout,
                circuit=template.name, parameters=params,
            ),
            pool=pool,
        )
        return trace.time, trace.vectors, trace.engine_version

    def run_states(states, periods: int):
        engine = pool if pool is not None else shared_pool()
        futures = [
            engine.submit(TransientRequest(
                netlist=with_initial_conditions(
                    rendered.text, {e.name: float(v) for e, v in zip(storage, x)}),
                stop=periods * period, step=tmax, tmax=tmax, uic=True, save=tuple(saves),
                timeout=settings.steady.timeout, circuit=template.name, parameters=params))
            for x in states
        ]
        out = []
        for future in futures:
            trace = future.result()
            end = np.array([float(np.asarray(e.read(trace.vectors))[-1]) for e in storage])
            out.append((trace.time, trace.vectors, trace.engine_version, end))
        return out

    def watch(vectors):
        # Judged on what is analysed. The diode currents are narrow pulses at high drive; their
        # harmonics scatter by 1e-6..1e-5 from period to period with the engine's step placement,
        # which would read as settling that never ends.
        return [probe.evaluate(vectors)]

    steady = find_steady_state(run_periods, run_states, storage, fundamental_hz=f0, watch=watch,
                               settings=steady_settings, tmax=tmax, harmonics=harmonics)
    time = steady.time
    wave = probe.evaluate(steady.vectors)
    simulated = spectrum_from_samples(time, wave, fundamental_hz=f0, harmonics=harmonics,
                                      periods=1, method=settings.method)
    shape = waveform_metrics(time, wave, fundamental_hz=f0, periods=1, method=settings.method)

    ideal = None
    ideal_params: dict[str, Any] = {}
    notes = list(rendered.notes) if not template.builtin else []
    if bound_note and not steady.converged:
        notes.append(bound_note)
    if steady.fallback:
        notes.append(steady.fallback)
    if ideal_kind is not None and amplitude is not None:
        from .ideal import ideal_spectrum

        ideal_params = ideal_parameters(ideal_kind, template, rendered, amplitude=amplitude,
                                        fundamental_hz=f0)
        ideal = ideal_spectrum(ideal_kind, harmonics=harmonics, **ideal_params)
    elif ideal_kind is None:
        notes.append("no ideal counterpart known: give --ideal KIND to compare with one")
    estimate, estimate_figures = (None, {})
    if amplitude is not None:
        estimate, estimate_figures = drop_corrected_estimate(
            template, rendered, amplitude=amplitude, fundamental_hz=f0, harmonics=harmonics,
            ideal_kind=ideal_kind)
    rows = compare_spectra(simulated, ideal=ideal, estimate=estimate)

    metrics: dict[str, Any] = {
        "dc_v": shape.dc,
        "rms_v": shape.rms,
        "ripple_v": shape.ripple_pp,
        "peak_v": shape.peak,
        "trough_v": shape.trough,
        "crest_factor": shape.crest_factor,
        # THD re the fundamental only where there is one (not for full-wave outputs)
        "thd": thd(simulated) if _has_fundamental(simulated) else None,
        "thd_r": thd_rms(simulated),
        "thd_orders": f"2..{harmonics}",
    }
    if conduction:
        angles = [conduction_angle_deg(time, p.evaluate(steady.vectors), fundamental_hz=f0)
                  for p in conduction]
        metrics["conduction_angle_deg"] = float(np.mean(angles))
    metrics.update(estimate_figures)
    p_src = _source_power(template, rendered, time, steady.vectors, f0)
    load = _role(template, rendered, "load")
    if p_src is not None:
        metrics["source_power_w"] = p_src
    if p_src is not None and p_src > 0 and load is not None and probe == template.default_probe:
        eff = conversion_efficiency(simulated, load_ohm=load, source_power_w=p_src)
        metrics["efficiency"] = {str(n): float(e) for n, e in enumerate(eff)}
        page = _page_check(template, rendered, time, steady.vectors, f0, harmonics,
                           settings.method, simulated, load)
        if page is not None:
            metrics["page"] = page.to_dict()
            if page.exceeds:
                notes.append("a conversion efficiency exceeds Page's 1/n^2 bound for positive "
                             "resistors: check the circuit for reactive or active elements")
    if settings.mains_class is not None:
        from .mains import line_current_check

        spectra = _source_spectra(template, rendered, time, steady.vectors, f0, harmonics,
                                  settings.method)
        if spectra is None:
            raise InputError(f"{template.name}: the mains check needs the power source "
                             "(roles.power_source in the metadata)")
        order = min(40, harmonics)
        if order < 2:
            raise InputError("the mains check needs --harmonics 2 or more (40 covers the standard)")
        verdict = line_current_check(spectra[1], supply_voltage=spectra[0],
                                     limit_class=settings.mains_class,
                                     power_w=settings.mains_power_w, max_order=order)
        metrics["mains"] = verdict.to_dict()
        metrics["power_factor"] = verdict.power_factor
        metrics["displacement_factor"] = verdict.displacement_factor
        if order < 40:
            notes.append(f"line-current orders above {order} not checked: raise --harmonics to 40")
    last = time >= time[-1] - period * (1 + 1e-12)
    return RunResult(
        circuit=template.name,
        title=template.title,
        parameters=dict(rendered.parameters),
        choices=dict(rendered.choices),
        probe=probe.label,
        fundamental_hz=f0,
        amplitude=amplitude,
        ideal_kind=ideal_kind,
        estimate_kind=template.estimate_kind if estimate is not None else None,
        engine_version=steady.engine_version,
        steady=steady,
        metrics=metrics,
        rows=rows,
        simulated=simulated,
        ideal=ideal,
        estimate=estimate,
        period_time=time[last],
        period_wave=wave[last],
        ideal_parameters=ideal_params,
        notes=tuple(notes),
        settings=settings,
    )
