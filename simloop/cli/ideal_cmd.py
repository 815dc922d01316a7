"""Closed-form spectrum of an ideal waveform, in magnitude-phase form.

f(t) = A0 + sum_n A_n cos(n w0 t - psi_n); amplitudes are peak values [V]. Prints a table and
optionally writes JSON (--json) and a PNG (--plot): the waveform over one period above its
spectrum in dBV (re 1 V rms).
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path
from typing import Any

from ..errors import InputError
from ..vocab import TIME_REFERENCES, WAVEFORM_KINDS
from ._common import Outputs, harmonics_count, number, write_json


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("kind", choices=WAVEFORM_KINDS, metavar="KIND",
                   help="waveform: " + ", ".join(WAVEFORM_KINDS))
    p.add_argument("--amplitude", required=True, type=number("--amplitude", nonnegative=True),
                   metavar="V", help="peak value of the drive or pulse [V] (SPICE suffixes allowed: 10, 3.3, 500m)")
    p.add_argument("--fundamental", default=1000.0, type=number("--fundamental", positive=True),
                   metavar="HZ", help="fundamental frequency f0 [Hz] (default 1k)")
    p.add_argument("--harmonics", default=10, type=harmonics_count, metavar="N",
                   help="highest harmonic order N, 1..10000 (default 10)")
    p.add_argument("--duty", type=number("--duty"), metavar="D",
                   help="duty cycle in (0, 1) for pulse and trapezoid (trapezoid: width between 50 %% points = D/f0)")
    p.add_argument("--conduction-angle", type=number("--conduction-angle"), metavar="DEG",
                   help="full conduction angle of the truncated cosine, (0, 360] degrees")
    p.add_argument("--rise", type=number("--rise", nonnegative=True), metavar="S",
                   help="trapezoid 0-100 %% rise time [s] (a linear ramp's 10-90 %% time is 0.8 of it)")
    p.add_argument("--fall", type=number("--fall", nonnegative=True), metavar="S",
                   help="trapezoid 0-100 %% fall time [s] (default: equal to --rise)")
    p.add_argument("--delay", default=0.0, type=number("--delay", nonnegative=True), metavar="S",
                   help="start of the pulse after t = 0 for pulse, square and trapezoid [s]")
    p.add_argument("--reference", default="cosine", choices=TIME_REFERENCES,
                   help="time origin of rectified and truncated-cosine waveforms: cosine (drive "
                        "peak at t = 0) or sine (rising zero crossing at t = 0, like a SPICE SIN source)")
    p.add_argument("--bipolar", action="store_true", help="square: swing -A..+A instead of 0..A")
    p.add_argument("--json", type=Path, metavar="PATH", help="write the spectrum as JSON")
    p.add_argument("--plot", type=Path, metavar="PATH", help="write a PNG: waveform above spectrum in dBV")


def _need(args: argparse.Namespace, name: str, kind: str) -> Any:
    value = getattr(args, name.replace("-", "_"))
    if value is None:
        raise InputError(f"{kind} needs --{name} (see simloop ideal --help)")
    return value


def parameters_from_args(args: argparse.Namespace) -> dict[str, Any]:
    """The keyword parameters of :func:`simloop.ideal.ideal_spectrum` for the chosen kind."""
    kind = args.kind
    params: dict[str, Any] = {"fundamental_hz": args.fundamental}
    if kind in ("half-wave", "full-wave"):
        params.update(amplitude=args.amplitude, reference=args.reference)
    elif kind == "pulse":
        params.update(amplitude=args.amplitude, duty=_need(args, "duty", kind), delay=args.delay)
    elif kind == "square":
        params.update(amplitude=args.amplitude, delay=args.delay, bipolar=args.bipolar)
    elif kind == "truncated-cosine":
        angle = _need(args, "conduction-angle", kind)
        if not 0.0 < angle <= 360.0:
            raise InputError(f"--conduction-angle must be in (0, 360] degrees, got {angle:g}")
        params.update(peak=args.amplitude, conduction_angle=math.radians(angle),
                      reference=args.reference)
    elif kind == "trapezoid":
        duty = _need(args, "duty", kind)
        rise = _need(args, "rise", kind)
        fall = rise if args.fall is None else args.fall
        params.update(amplitude=args.amplitude, width=duty / args.fundamental, rise=rise,
                      fall=fall, delay=args.delay)
    return params


def format_table(title: str, spectrum) -> str:
    """The printed table: one row per order, peak amplitude, dBV, dBc, phase."""
    from ..fourier import dbc, spectrum_dbv
    from ..units import format_number

    lines = [title, "f(t) = A0 + sum A_n cos(n w0 t - psi_n); A_n peak, dBV re 1 V rms, dBc re n = 1"]
    lines.append(f"{'n':>4}  {'f [Hz]':>10}  {'A_n [V]':>13}  {'dBV':>8}  {'dBc':>8}  {'psi_n [deg]':>11}")
    levels = spectrum_dbv(spectrum)
    rel = dbc(spectrum) if spectrum.amplitude[1] > 0 else None
    for n in range(spectrum.harmonics + 1):
        a = spectrum.amplitude[n]
        dbv = f"{levels[n]:8.2f}" if math.isfinite(levels[n]) else f"{'-':>8}"
        if rel is None or n == 0 or not math.isfinite(rel[n]):
            dbc_s = f"{'-':>8}"
        else:
            dbc_s = f"{rel[n]:8.2f}"
        lines.append(
            f"{n:>4}  {format_number(n * spectrum.fundamental_hz):>10}  {a:13.6g}  {dbv}  {dbc_s}  "
            f"{spectrum.phase_deg[n]:11.3f}"
        )
    return "\n".join(lines)


def main(args: argparse.Namespace) -> int:
    from ..ideal import ideal_spectrum, ideal_waveform

    import numpy as np

    params = parameters_from_args(args)
    spectrum = ideal_spectrum(args.kind, harmonics=args.harmonics, **params)
    described = ", ".join(f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}" for k, v in params.items())
    print(format_table(f"ideal {args.kind}: {described}", spectrum))
    outputs = Outputs("ideal")
    if args.json:
        shown = dict(params)
        if "conduction_angle" in shown:
            shown["conduction_angle_deg"] = math.degrees(shown.pop("conduction_angle"))
        document = {
            "kind": args.kind,
            "parameters": shown,
            "convention": "f(t) = A0 + sum A_n cos(n w0 t - psi_n); amplitude_v peak; n = 0 is DC",
            "harmonics": spectrum.rows(),
        }
        outputs.attempt(str(args.json), lambda: write_json(args.json, document))
    if args.plot:
        def plot() -> None:
            from ..plots import ideal_figure, save

            t = np.linspace(0.0, 1.0 / args.fundamental, 2001)
            v = ideal_waveform(args.kind, t, **params)
            save(ideal_figure(spectrum, t, v, title=f"ideal {args.kind}"), args.plot)

        outputs.attempt(str(args.plot), plot)
    return outputs.status()
