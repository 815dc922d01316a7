"""Run the built-in demonstration: invented scenarios, each simulated and set beside theory.

Writes, for each scenario, the printed table (.txt), the JSON result, the plot (.png) and a
self-contained HTML report into --out.
"""

from __future__ import annotations

import argparse
from pathlib import Path

#: (file stem, circuit, --set values, harmonics, what it shows)
SCENARIOS: tuple[tuple[str, str, dict[str, float | str], int, str], ...] = (
    ("bench-supply", "half-wave", {"vpk": 12.0, "rload": 100.0, "cres": 0.0}, 10,
     "12 V secondary, 1 A rectifier into 100 ohm: the diode drop lowers DC by ~10 % and lifts odd harmonics"),
    ("bench-supply-reservoir", "half-wave", {"vpk": 12.0, "rload": 100.0, "cres": 1e-3}, 10,
     "the same with a 1 mF reservoir: short conduction, large harmonic content of the ripple"),
    ("sensor-bridge", "full-wave-bridge", {"vpk": 9.0, "rload": 470.0}, 10,
     "9 V floating secondary into a bridge: no fundamental, two diode drops"),
    ("rf-doubler", "full-wave-bridge",
     {"vpk": 2.0, "freq": 10e6, "rload": 200.0, "rsrc": 50.0, "diode": "sl_schottky"}, 8,
     "10 MHz doubler with small Schottky diodes behind 50 ohm: 2nd harmonic at 20 MHz"),
    ("pol-driver", "switching-stage", {"duty": 0.25, "fsw": 1e6}, 20,
     "1 MHz low-side switch at 25 % duty: the 4th harmonic null and the edge roll-off"),
    ("mains-front-end", "full-wave-bridge",
     {"vpk": 325.0, "rsrc": 2.0, "cres": 220e-6, "rload": 1e3}, 40,
     "230 V mains bridge into 220 uF, about 100 W: the peaky line current against the Class D "
     "limits (simulation only: never build or probe this without licensed practice)"),
)

#: Scenarios whose line current is checked against an IEC 61000-3-2 class.
MAINS_CLASS = {"mains-front-end": "D"}


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", type=Path, default=Path("demo-output"), metavar="DIR",
                   help="folder for the results (default demo-output)")
    p.add_argument("--only", metavar="NAME", help="run only this scenario: " +
                   ", ".join(s[0] for s in SCENARIOS))


def main(args: argparse.Namespace) -> int:
    from ..analyse import RunSettings, run_circuit
    from ..engine import EnginePool
    from ..errors import InputError
    from ._common import Outputs, write_atomic, write_json
    from .run_cmd import CAUTION, format_result, needs_caution, plot_result, write_run_report

    chosen = [s for s in SCENARIOS if args.only in (None, s[0])]
    if not chosen:
        raise InputError(f"no demo scenario {args.only!r}; choose one of "
                         + ", ".join(s[0] for s in SCENARIOS))
    outputs = Outputs("demo")
    with EnginePool(1) as pool:
        for stem, circuit, sets, harmonics, story in chosen:
            values = {k: v for k, v in sets.items() if not isinstance(v, str)}
            choices = {k: v for k, v in sets.items() if isinstance(v, str)}
            settings = RunSettings(harmonics=harmonics, mains_class=MAINS_CLASS.get(stem))
            result = run_circuit(circuit, values=values, choices=choices, settings=settings,
                                 pool=pool)
            text = f"== {stem}: {story}\n" + format_result(result)
            if needs_caution(result):
                text += "\n" + CAUTION
            print(text + "\n")
            base = args.out / stem
            outputs.attempt(f"{base}.txt", lambda: write_atomic(base.with_suffix(".txt"), text + "\n"))
            document = result.to_dict()
            if needs_caution(result):
                document["caution"] = CAUTION
            outputs.attempt(f"{base}.json", lambda: write_json(base.with_suffix(".json"), document))
            outputs.attempt(f"{base}.png", lambda: plot_result(result, base.with_suffix(".png")))
            outputs.attempt(f"{base}.html", lambda: write_run_report(result, base.with_suffix(".html")))
    return outputs.status()
