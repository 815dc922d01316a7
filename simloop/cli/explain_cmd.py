"""Which effect moved each harmonic: re-run the circuit adding one realism at a time.

Rectifiers: ideal, constant drop, exponential junction, + series resistance, + junction
capacitance and recovery, + source impedance, + load and filter (as built). Switching stages:
ideal pulse train, + on-resistance, + stray inductance, + stray capacitance. Prints the change
of each harmonic [dB] made by each step (they add up to the total from ideal to simulated);
--json writes levels, cumulative and per-step changes in dB and V; --plot the staircase.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from ._common import Outputs, write_json
from .run_cmd import add_engine_arguments, settings_from_args, split_assignments


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("circuit", metavar="CIRCUIT",
                   help="built-in circuit name, or a netlist whose sidecar declares [roles]")
    add_engine_arguments(p)
    p.add_argument("--json", type=Path, metavar="PATH", help="write the breakdown as JSON")
    p.add_argument("--plot", type=Path, metavar="PATH", help="write a PNG: one staircase per harmonic")
    p.add_argument("--report", type=Path, metavar="PATH",
                   help="write one self-contained HTML report: the run as built and the breakdown")


def format_breakdown(breakdown) -> str:
    d = breakdown.to_dict()
    orders = d["harmonics"]
    lines = [f"{d['circuit']}: {d['title']} - probe {d['probe']}",
             "change of each harmonic made by each step [dB]; '-' where the ideal has none "
             "(see --json step_v for volts)",
             f"  {'step':<26}" + "".join(f"{'n=' + str(n):>9}" for n in orders)]
    for name, row in zip(d["steps"], d["step_db"]):
        lines.append(f"  {name:<26}" + "".join(f"{'-':>9}" if v is None else f"{v:+9.3f}"
                                              for v in row))
    total = d["cumulative_db"][-1]
    lines.append(f"  {'total (simulated - ideal)':<26}" + "".join(
        f"{'-':>9}" if v is None else f"{v:+9.3f}" for v in total))
    for note in d["notes"]:
        lines.append(f"  note: {note}")
    return "\n".join(lines)


def main(args: argparse.Namespace) -> int:
    from ..engine import EnginePool
    from ..explain import breakdown_figure, explain_circuit
    from ..netlist import load_circuit

    template = load_circuit(args.circuit)
    values, choices = split_assignments(template, args.set)
    settings = settings_from_args(args)
    with EnginePool(2) as pool:
        breakdown = explain_circuit(template, values=values, choices=choices, settings=settings,
                                    pool=pool)
    print(format_breakdown(breakdown))
    outputs = Outputs("explain")
    if args.json:
        outputs.attempt(str(args.json), lambda: write_json(args.json, breakdown.to_dict()))
    if args.plot:
        def plot() -> None:
            from ..plots import save

            save(breakdown_figure(breakdown), args.plot)

        outputs.attempt(str(args.plot), plot)
    if args.report:
        def report() -> None:
            from ..html_report import figure_png, run_report, write_report
            from .run_cmd import CAUTION, needs_caution, result_figure

            result = breakdown.result
            document = {**result.to_dict(), "units": {n: s.unit for n, s in template.parameters.items()
                                                      if s.unit}}
            figures = {"the circuit as built": figure_png(result_figure(result)),
                       "which effect moved each harmonic": figure_png(breakdown_figure(breakdown))}
            write_report(args.report, run_report(
                document, figures=figures, breakdown=breakdown.to_dict(),
                caution=CAUTION if needs_caution(result) else None))

        outputs.attempt(str(args.report), report)
    return outputs.status()
