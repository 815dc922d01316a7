"""List the built-in circuits with their parameters, units, defaults, ranges and model choices."""

from __future__ import annotations

import argparse
import json


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--json", action="store_true", help="print machine-readable JSON instead")


def main(args: argparse.Namespace) -> int:
    from ..netlist import list_builtin
    from ..units import format_number

    circuits = list_builtin()
    if args.json:
        doc = [
            {
                "name": t.name,
                "title": t.title,
                "ideal_kind": t.ideal_kind,
                "estimate_kind": t.estimate_kind,
                "default_probe": t.default_probe.label if t.default_probe else None,
                "probes": {k: p.label for k, p in t.probes.items()},
                "parameters": {
                    k: {"default": p.default, "unit": p.unit, "meaning": p.meaning,
                        "min": p.min, "max": p.max}
                    for k, p in t.parameters.items()
                },
                "choices": {k: {"default": c.default, "allowed": list(c.allowed)}
                            for k, c in t.choices.items()},
            }
            for t in circuits
        ]
        print(json.dumps(doc, indent=2))
        return 0
    for t in circuits:
        print(f"{t.name}: {t.title}")
        print(f"  ideal {t.ideal_kind}, estimate {t.estimate_kind}, probe "
              f"{t.default_probe.label if t.default_probe else '-'}")
        for name, p in t.parameters.items():
            rng = ""
            if p.min is not None or p.max is not None:
                lo = format_number(p.min) if p.min is not None else ""
                hi = format_number(p.max) if p.max is not None else ""
                rng = f"  [{lo} .. {hi}]"
            print(f"    {name:<8} {format_number(p.default):>8} {p.unit:<4} {p.meaning}{rng}")
        for name, c in t.choices.items():
            print(f"    {name:<8} {c.default:>8}      choice of: {', '.join(c.allowed)}")
        if t.probes:
            print("    probes: " + ", ".join(f"{k}={p.label}" for k, p in t.probes.items()))
        print()
    return 0
