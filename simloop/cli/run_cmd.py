"""Simulate a circuit to its periodic steady state and set each harmonic beside theory.

CIRCUIT is a built-in name (see `simloop netlists`) or the path of your own netlist (untrusted:
.control blocks, shell commands, code models and includes outside its folder are refused). Each
harmonic n = 0..N is shown as ideal (closed form), drop-corrected estimate and simulated, peak
values [V], with the simulated value's deviation from ideal in dB.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
from pathlib import Path

from ..errors import InputError
from ..vocab import RESAMPLE_METHODS, STEADY_METHODS, WAVEFORM_KINDS
from ._common import Outputs, engine_harmonics_count, number, write_json

#: Above these the drive is no longer safety-extra-low voltage (30 V rms / 42.4 V peak AC,
#: 60 V DC: the ES1 limits of IEC 62368-1 [from memory]).
ELV_PEAK_V = 42.4

CAUTION = (
    "CAUTION: drive above safety-extra-low voltage. Mains-connected and high-voltage rectifiers "
    "can kill; reservoir capacitors keep a dangerous charge after power-off (discharge and "
    "measure before touching). Simulation is no substitute for local electrical codes and "
    "licensed practice."
)


def add_engine_arguments(p: argparse.ArgumentParser) -> None:
    """Options shared by every command that runs the engine."""
    p.add_argument("--set", action="append", default=[], metavar="NAME=VALUE",
                   help="parameter value (SPICE suffixes: 1k, 10u, 2meg) or model choice "
                        "(diode=sl_schottky); repeat for several")
    p.add_argument("--probe", metavar="EXPR",
                   help="what to analyse: a node voltage v(out), a difference v(a,b), a source "
                        "current i(V1), or a probe name of the circuit (default: its own)")
    p.add_argument("--fundamental", type=number("--fundamental", positive=True), metavar="HZ",
                   help="fundamental frequency [Hz] (default: from the circuit or its first SIN/PULSE source)")
    p.add_argument("--amplitude", type=number("--amplitude", positive=True), metavar="V",
                   help="drive amplitude used for the ideal and the estimate [V] (default: from the circuit)")
    p.add_argument("--ideal", choices=WAVEFORM_KINDS, metavar="KIND",
                   help="ideal counterpart: " + ", ".join(WAVEFORM_KINDS) + " (default: the circuit's)")
    p.add_argument("--harmonics", default=10, type=engine_harmonics_count, metavar="N",
                   help="highest harmonic order N, 1..1000 (default 10)")
    p.add_argument("--tmax", type=number("--tmax", positive=True), metavar="S",
                   help="engine maximum time step [s] (default T/max(2000, 200 N))")
    p.add_argument("--tolerance", type=number("--tolerance", positive=True), default=1e-6,
                   metavar="REL", help="steady state: largest change of the harmonics still to "
                                       "come, relative to the largest (default 1e-6)")
    p.add_argument("--max-periods", type=int, default=2000, metavar="P",
                   help="give up settling after P periods (default 2000)")
    p.add_argument("--timeout", type=number("--timeout", positive=True), metavar="S",
                   default=None,
                   help="wall-clock limit of one engine run [s] (default $SIMLOOP_TIMEOUT or 120)")
    p.add_argument("--steady", choices=STEADY_METHODS, default="auto",
                   help="how the periodic steady state is found: auto (settle; shoot the "
                        "capacitor and inductor states when settling is slow), settle, shoot")
    p.add_argument("--max-steps", type=number("--max-steps", positive=True), default=20e6,
                   metavar="N", help="resource bound: most engine time steps per run (default 20meg)")
    p.add_argument("--max-output", type=number("--max-output", positive=True), default=512.0,
                   metavar="MIB", help="resource bound: most vector data per run [MiB] (default 512)")
    p.add_argument("--mains-class", choices=("A", "D"),
                   help="check the source current against IEC 61000-3-2 Class A or D limits "
                        "(values from secondary sources; use --harmonics 40)")
    p.add_argument("--mains-power", type=number("--mains-power", positive=True), metavar="W",
                   help="active input power for the Class D limits [W] (default: from the spectra)")
    p.add_argument("--resample", choices=RESAMPLE_METHODS, default="spline",
                   help="how engine points become a continuous period: spline (default) or linear")


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("circuit", metavar="CIRCUIT", help="built-in circuit name or netlist path")
    add_engine_arguments(p)
    p.add_argument("--json", type=Path, metavar="PATH", help="write the full result as JSON")
    p.add_argument("--plot", type=Path, metavar="PATH",
                   help="write a PNG: one period simulated over ideal, and the three spectra in dBV")
    p.add_argument("--report", type=Path, metavar="PATH",
                   help="write one self-contained HTML report (tables, figures, cautions)")


def split_assignments(template, assignments: list[str]) -> tuple[dict[str, float], dict[str, str]]:
    """``--set`` strings into parameter values and model choices (validated, one-line errors)."""
    from ..netlist import parse_assignment

    values: dict[str, float] = {}
    choices: dict[str, str] = {}
    for text in assignments:
        name, value = parse_assignment(text, template)
        if isinstance(value, str):
            choices[name] = value
        else:
            values[name] = value
    return values, choices


def settings_from_args(args: argparse.Namespace):
    from ..analyse import RunSettings
    from ..steady import SteadySettings

    if args.max_periods < 12:
        raise InputError("--max-periods must be at least 12")
    timeout = args.timeout
    if timeout is None:
        from ..units import parse_number

        timeout = parse_number(os.environ.get("SIMLOOP_TIMEOUT", "120"),
                               what="environment variable SIMLOOP_TIMEOUT (seconds)")
    steady = SteadySettings(tolerance=args.tolerance, max_periods=args.max_periods,
                            tmax=args.tmax, timeout=timeout, method=args.steady,
                            max_points=args.max_steps, max_output_bytes=args.max_output * 2**20)
    return RunSettings(harmonics=args.harmonics, probe=args.probe,
                       fundamental_hz=args.fundamental, amplitude=args.amplitude,
                       ideal_kind=args.ideal, steady=steady, method=args.resample,
                       mains_class=args.mains_class, mains_power_w=args.mains_power)


def _fmt(value, width: int, spec: str = ".6g") -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return f"{'-':>{width}}"
    return f"{value:{width}{spec}}"


def format_result(result) -> str:
    """The printed report of one run: heading, harmonic table, figures."""
    from ..units import format_number, format_si

    r = result
    st = r.steady
    params = ", ".join(f"{k}={format_number(v)}" for k, v in r.parameters.items())
    choices = ", ".join(f"{k}={v}" for k, v in r.choices.items())
    lines = [
        f"{r.circuit}: {r.title}",
        f"  parameters  {params or '-'}" + (f"; {choices}" if choices else ""),
        f"  probe {r.probe}   f0 {format_si(r.fundamental_hz, 'Hz')}   engine {r.engine_version}   "
        f"ideal {r.ideal_kind or '-'}   estimate {r.estimate_kind or '-'}",
        f"  steady state {'reached' if st.converged else 'NOT reached'} "
        + (f"by shooting ({st.iterations} Newton iterations, state residual "
           f"{st.shooting_residual:.1e})" if st.method == "shooting"
           else f"after {st.periods_simulated} periods")
        + f"; engine work {st.engine_periods} periods; last change {st.residual:.1e}, "
        f"still to come {st.drift:.1e}",
        "",
        f"  {'n':>3} {'f [Hz]':>9} {'ideal [V]':>12} {'estimate [V]':>13} {'simulated [V]':>14} "
        f"{'sim-ideal [dB]':>15} {'sim-est [dB]':>13} {'phase [deg]':>12}",
    ]
    for row in r.rows:
        lines.append(
            f"  {row.n:>3} {format_number(row.freq_hz):>9} {_fmt(row.ideal_v, 12)} "
            f"{_fmt(row.estimate_v, 13)} {_fmt(row.sim_v, 14)} {_fmt(row.delta_db, 15, '.3f')} "
            f"{_fmt(row.estimate_delta_db, 13, '.3f')} {_fmt(row.sim_phase_deg, 12, '.2f')}"
        )
    m = r.metrics
    figures = [f"DC {m['dc_v']:.6g} V", f"RMS {m['rms_v']:.6g} V", f"ripple {m['ripple_v']:.4g} V p-p"]
    if m.get("thd") is not None:
        figures.append(f"THD {100 * m['thd']:.3f} % (n = {m['thd_orders']}, re n = 1)")
    if "conduction_angle_deg" in m:
        figures.append(f"conduction {m['conduction_angle_deg']:.1f} deg")
    if "drop_v" in m:
        figures.append(f"estimate drop {m['drop_v']:.3f} V")
    lines += ["", "  " + "   ".join(figures)]
    if "efficiency" in m:
        eff = m["efficiency"]
        shown = ", ".join(f"n={n}: {100 * e:.3g} %" for n, e in list(eff.items())[:6])
        lines.append(f"  conversion efficiency (load power at n / source power): {shown}")
    if "page" in m:
        rows = m["page"]["orders"]
        shown = ", ".join(f"n={row['order']}: {100 * row['efficiency']:.3g} % (<= "
                          f"{100 * row['page_bound']:.3g} %)" for row in rows if 2 <= row["order"] <= 4)
        lines.append(f"  Page's bound (power into the diode at f0 -> load at n): {shown}")
    if "mains" in m:
        mv = m["mains"]
        worst = min((row for row in mv["orders"] if row["limit_a_rms"] is not None),
                    key=lambda row: row["margin_a"], default=None)
        verdict = "PASS" if mv["passed"] else "FAIL"
        lines.append(f"  line current vs IEC 61000-3-2 Class {mv['limit_class']}: {verdict}"
                     + (f" (worst order {worst['order']}: {worst['current_a_rms']:.4g} A rms, "
                        f"limit {worst['limit_a_rms']:.4g} A)" if worst else "")
                     + (f", power factor {mv['power_factor']:.4f}" if mv.get("power_factor") else ""))
        lines.append(f"  ({mv['source_note']})")
    for note in r.notes:
        lines.append(f"  note: {note}")
    return "\n".join(lines)


def needs_caution(result) -> bool:
    return result.amplitude is not None and result.amplitude > ELV_PEAK_V


def write_outputs(result, args: argparse.Namespace, outputs: Outputs) -> None:
    """JSON and plot of one run, each attempted even if the other fails."""
    if args.json:
        document = result.to_dict()
        if needs_caution(result):
            document["caution"] = CAUTION
        outputs.attempt(str(args.json), lambda: write_json(args.json, document))
    if args.plot:
        outputs.attempt(str(args.plot), lambda: plot_result(result, args.plot))
    if getattr(args, "report", None):
        units = getattr(args, "units", None)
        outputs.attempt(str(args.report), lambda: write_run_report(result, args.report, units=units))


def plot_result(result, path: Path) -> None:
    from ..plots import save

    save(result_figure(result), path)


def result_figure(result):
    """One period simulated over ideal, and the spectra side by side (a matplotlib Figure)."""
    from ..plots import comparison_figure

    spectra = [("ideal", result.ideal)] if result.ideal is not None else []
    if result.estimate is not None:
        spectra.append(("estimate", result.estimate))
    spectra.append(("simulated", result.simulated))
    ideal_wave = None
    if result.ideal is not None:
        from ..ideal import ideal_waveform

        ideal_wave = ideal_waveform(result.ideal_kind, result.period_time, **result.ideal_parameters)
    return comparison_figure(t=result.period_time, simulated_wave=result.period_wave,
                             ideal_wave=ideal_wave, spectra=spectra,
                             title=f"{result.circuit}: {result.title}",
                             probe_label=f"{result.probe} [V]")


def write_run_report(result, path: Path, *, units=None, breakdown=None) -> None:
    """The self-contained HTML report of one run."""
    from ..html_report import figure_png, run_report, write_report

    document = {**result.to_dict(), "units": dict(units or {})}
    html = run_report(document, figures={"one period and spectra": figure_png(result_figure(result))},
                      breakdown=breakdown, caution=CAUTION if needs_caution(result) else None)
    write_report(path, html)


def main(args: argparse.Namespace) -> int:
    from ..analyse import run_circuit
    from ..netlist import load_circuit

    template = load_circuit(args.circuit)
    values, choices = split_assignments(template, args.set)
    settings = settings_from_args(args)
    result = run_circuit(template, values=values, choices=choices, settings=settings)
    print(format_result(result))
    args.units = {name: spec.unit for name, spec in template.parameters.items() if spec.unit}
    if needs_caution(result):
        print(CAUTION, file=sys.stderr)
    outputs = Outputs("run")
    write_outputs(result, args, outputs)
    if not result.converged:
        outputs.failures.append(
            f"{result.circuit}: no periodic steady state within {result.steady.periods_simulated} "
            f"periods (change still to come {result.steady.drift:.1e} > tolerance "
            f"{settings.steady.tolerance:.1e}); raise --max-periods or --tolerance. The spectrum "
            "shown is NOT a steady-state one"
        )
    return outputs.status()
