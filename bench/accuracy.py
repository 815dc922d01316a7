"""Accuracy benchmark: harmonics vs TMAX and resampling method, and vs the engine's own fourier.

Prints figures; asserts nothing and is never run by the tests. Against the independent
first-principles reference of ``tests/reference`` (Shockley junction with GMIN solved point by
point for the resistive load; solve_ivp plus Newton shooting for the reservoir), on the two
half-wave circuits of ``tests/data/circuits`` (``half-wave-resistive.cir``,
``half-wave-reservoir.cir``, both 10 V at 1 kHz, diode model with IS, N, RS only):

1. ``simloop``: :func:`simloop.analyse.run_circuit` at TMAX = T/250, T/500, T/1000, T/2000 and
   T/4000 (otherwise default settings, 10 harmonics). The harmonics of the steady-state period
   are taken with the cubic spline (what ``run_circuit`` returns) and, from the same engine
   points, with straight lines (:func:`simloop.fourier.spectrum_from_samples`,
   ``method="linear"``).
2. ``engine .four``: a batch netlist of our own, the same circuit with ``.tran TMAX TSTOP 0
   TMAX`` (TSTOP = the periods simloop simulated) and ``.four 1k v(out)``, run with
   ``ngspice -b``; the printed table (DC and harmonics 1..9, default grid of 200 points,
   interpolation degree 1, 6 significant digits) is parsed.
3. ``engine fourier, 15 digits``: the same transient with a ``.control`` block (``set
   numdgt=15``, ``run``, ``fourier 1k v(out)``), so that the engine's Fourier algorithm is
   judged without the rounding of its printout.

Error = max over n of ``|C_n - C_n(ref)| / max |C(ref)|`` with complex amplitudes
``C_n = A_n exp(-j psi_n)``; n <= 10 for simloop's own table, n <= 9 wherever the engine's
fourier is compared (it gives no 10th harmonic). ngspice reports ``v = A0 + sum A_n sin(n w t +
phi_n)`` with phi in degrees; simloop's ``A_n cos(n w t - psi_n)`` has ``psi_n = 90 deg - phi_n``.
The slope is the least-squares fit of log(error) against log(TMAX) over the five TMAX values.

Run from the repository root::

    .venv/bin/python bench/accuracy.py                 # about a minute
    .venv/bin/python bench/accuracy.py --json accuracy.json

Engine workers are spawned: everything runs under the ``__main__`` guard below.
"""

from __future__ import annotations

import os
import sys

if __name__ == "__main__":
    for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(_name, "1")

import argparse  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import re  # noqa: E402
import shutil  # noqa: E402
import subprocess  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402
from typing import Any  # noqa: E402
from benchinfo import machine

ROOT = Path(__file__).resolve().parent.parent
CIRCUITS = ROOT / "tests" / "data" / "circuits"
HARMONICS = 10
DIVISORS = (250, 500, 1000, 2000, 4000)
TARGET_RATIO = 10.0
#: Engine workers are recycled after 50 runs by default; Python 3.11's ProcessPoolExecutor can
#: deadlock when that happens with runs queued (CPython gh-115634), so recycling is off here.
NO_RECYCLING = 10**9
NAMES = {"resistive": "half-wave-resistive.cir", "reservoir": "half-wave-reservoir.cir"}


def _say(text: str = "") -> None:
    print(text, flush=True)


# ------------------------------------------------------------------------------ the circuits
def circuit_values(path: Path) -> tuple[dict[str, float], dict[str, float]]:
    """The ``.param`` defaults and the diode model (IS, N, RS) of one test netlist."""
    from simloop.units import parse_number

    text = path.read_text()
    params: dict[str, float] = {}
    for line in text.splitlines():
        if line.lower().startswith(".param"):
            for key, value in re.findall(r"(\w+)\s*=\s*(\S+)", line[6:]):
                params[key.lower()] = parse_number(value)
    match = re.search(r"^\.model\s+\S+\s+d\s*\((.*)\)", text, re.IGNORECASE | re.MULTILINE)
    if match is None:
        raise SystemExit(f"{path}: no diode .model line")
    model = {k.upper(): parse_number(v) for k, v in re.findall(r"(\w+)\s*=\s*(\S+)", match[1])}
    extra = set(model) - {"IS", "N", "RS"}
    if extra:
        raise SystemExit(f"{path}: the reference covers IS, N, RS only; the model also has "
                         f"{', '.join(sorted(extra))}")
    return params, model


def reference(kind: str, params: dict[str, float], model: dict[str, float]) -> tuple[Any, Any]:
    """Complex amplitudes C_0..C_10 and the waveform v_out(t) from tests/reference (which
    shares no code with simloop)."""
    import numpy as np

    sys.path.insert(0, str(ROOT / "tests"))
    from reference import rectifiers as ref

    p = dict(vm=params["vm"], freq=params["f"], rs=params["rs"], rl=params["rl"],
             is_=model["IS"], n=model.get("N", 1.0), rser=model.get("RS", 0.0))
    if kind == "resistive":
        def wave(t):
            return ref.half_wave_resistive(t, **p)[0]

        a0, amp, phase = ref.fourier_amplitudes(wave, freq=p["freq"], harmonics=HARMONICS,
                                                breakpoints=ref.resistive_breakpoints(**p))
    else:
        sol = ref.half_wave_capacitor(**p, c=params["c"], harmonics=HARMONICS)
        a0, amp, phase, wave = sol.a0, sol.amp, sol.phase, sol.v_out
    c = np.asarray(amp) * np.exp(-1j * np.asarray(phase))
    c[0] = a0
    return c, wave


def complex_amplitudes(spectrum: Any) -> Any:
    import numpy as np

    c = np.asarray(spectrum.amplitude) * np.exp(-1j * np.asarray(spectrum.phase_rad))
    c[0] = spectrum.amplitude[0]
    return c


def relative_error(c: Any, ref: Any, *, orders: int) -> float:
    import numpy as np

    return float(np.max(np.abs(np.asarray(c)[: orders + 1] - np.asarray(ref)[: orders + 1]))
                 / np.max(np.abs(ref)))


# ------------------------------------------------------------------------------ engine fourier
_ROW = re.compile(r"^\s*(\d+)\s+([-+0-9.eE]+)\s+([-+0-9.eE]+)\s+([-+0-9.eE]+)(?:\s|$)")


def parse_fourier(text: str, vector: str = "v(out)") -> tuple[Any, dict[str, str]]:
    """Complex amplitudes from ngspice's printed Fourier table, in simloop's convention.

    ngspice 39 prints, after ``Fourier analysis for v(out):`` and a line ``No. Harmonics: 10,
    THD: ..., Gridsize: 200, Interpolation Degree: 1``, a header, a dashed line and one row per
    order: harmonic number, frequency [Hz], magnitude, phase [deg], normalised magnitude and
    phase. Rows are read until the first line that is not one.
    """
    import numpy as np

    for block in re.split(r"Fourier analysis for\s+", text)[1:]:
        name, _, body = block.partition(":")
        if name.strip().lower() != vector.lower():
            continue
        head = dict(re.findall(r"([A-Za-z. ]+?):\s*([^,\n]+)", body.split("\n", 2)[1]))
        rows = []
        for line in body.splitlines()[1:]:
            m = _ROW.match(line)
            if m:
                rows.append((int(m[1]), float(m[2]), float(m[3]), float(m[4])))
            elif rows:
                break
        if not rows:
            break
        n = np.array([r[0] for r in rows])
        if not np.array_equal(n, np.arange(len(rows))):
            raise ValueError(f"unexpected harmonic numbers {n.tolist()} in the fourier table")
        mag = np.array([r[2] for r in rows])
        phi = np.radians([r[3] for r in rows])
        c = mag * np.exp(1j * (phi - np.pi / 2))  # A sin(x + phi) = A cos(x - (pi/2 - phi))
        c[0] = mag[0] * math.cos(phi[0])  # DC: the magnitude with the sign its phase gives
        return c, {k.strip(): v.strip() for k, v in head.items()}
    raise ValueError(f"no Fourier table for {vector} in the engine's output")


def engine_fourier(path: Path, *, f0: float, tmax: float, periods: int, workdir: Path,
                   full_digits: bool) -> tuple[Any, dict[str, str], str]:
    """Run our batch netlist in ``ngspice -b`` and parse the engine's Fourier table."""
    text = re.sub(r"^\.end\s*$", "", path.read_text(), flags=re.IGNORECASE | re.MULTILINE)
    stop = periods / f0
    deck = text.rstrip("\n") + f"\n.tran {tmax!r} {stop!r} 0 {tmax!r}\n"
    if full_digits:
        deck += (".control\nset numdgt=15\nrun\n"
                 f"fourier {f0!r} v(out)\n.endc\n.end\n")
    else:
        deck += f".four {f0!r} v(out)\n.end\n"
    name = workdir / f"{path.stem}-{round(1 / (f0 * tmax))}-{int(full_digits)}.cir"
    name.write_text(deck)
    proc = subprocess.run(["ngspice", "-b", str(name)], capture_output=True, text=True)
    c, head = parse_fourier(proc.stdout + "\n" + proc.stderr)
    return c, head, deck


# ------------------------------------------------------------------------------ main
def slope(tmax: list[float], err: list[float]) -> float:
    import numpy as np

    return float(np.polyfit(np.log(tmax), np.log(err), 1)[0])



def bench_circuit(kind: str, pool: Any, workdir: Path) -> dict[str, Any]:
    import numpy as np

    from simloop.analyse import RunSettings, run_circuit
    from simloop.fourier import spectrum_from_samples
    from simloop.steady import SteadySettings

    path = CIRCUITS / NAMES[kind]
    params, model = circuit_values(path)
    f0 = params["f"]
    ref, wave = reference(kind, params, model)
    scale = float(np.max(np.abs(ref)))
    _say(f"\n== {kind} ({path.relative_to(ROOT)}): vm {params['vm']:g} V, f {f0:g} Hz, "
         f"model {model}")
    rows = []
    example_deck = ""
    for div in DIVISORS:
        tmax = 1.0 / (f0 * div)
        settings = RunSettings(harmonics=HARMONICS, probe="v(out)",
                               steady=SteadySettings(tmax=tmax))
        t0 = time.perf_counter()
        result = run_circuit(path, settings=settings, pool=pool)
        wall = time.perf_counter() - t0
        steady = result.steady
        t, v = np.asarray(steady.time), np.asarray(steady.vectors["out"])
        spline = complex_amplitudes(result.simulated)
        linear = complex_amplitudes(spectrum_from_samples(
            t, v, fundamental_hz=f0, harmonics=HARMONICS, periods=1, method="linear"))
        # the two parts of the error: the engine's points themselves (integration and Newton
        # tolerance), and the resampling alone (exact values at the engine's time points)
        last = t >= t[-1] - (1 + 1e-9) / f0
        exact = np.asarray(wave(t))
        points_err = float(np.max(np.abs(v[last] - exact[last])) / scale)
        spline_exact = complex_amplitudes(spectrum_from_samples(
            t, exact, fundamental_hz=f0, harmonics=HARMONICS, periods=1, method="spline"))
        linear_exact = complex_amplitudes(spectrum_from_samples(
            t, exact, fundamental_hz=f0, harmonics=HARMONICS, periods=1, method="linear"))
        # the engine's fourier over the same transient: TSTOP = the periods simloop simulated
        # (from t = 0, as settling does; a shooting result is a 3-period run from a set state)
        periods = steady.periods_simulated if steady.method == "settle" else 12
        four, head, deck = engine_fourier(path, f0=f0, tmax=tmax, periods=periods,
                                          workdir=workdir, full_digits=False)
        four15, head15, _ = engine_fourier(path, f0=f0, tmax=tmax, periods=periods,
                                           workdir=workdir, full_digits=True)
        if div == 2000:
            example_deck = deck
        row = {
            "tmax_divisor": div, "tmax_s": tmax, "wall_s": wall,
            "steady_method": steady.method, "periods": steady.periods_simulated,
            "engine_points_per_period": int(np.sum(t >= t[-1] - 1 / f0)),
            "spline": relative_error(spline, ref, orders=10),
            "linear": relative_error(linear, ref, orders=10),
            "spline_n9": relative_error(spline, ref, orders=9),
            "linear_n9": relative_error(linear, ref, orders=9),
            "points": points_err,
            "spline_exact_points": relative_error(spline_exact, ref, orders=10),
            "linear_exact_points": relative_error(linear_exact, ref, orders=10),
            "four": relative_error(four, ref, orders=9),
            "four15": relative_error(four15, ref, orders=9),
            "four_periods": periods,
            "four_header": head,
        }
        row["ratio_four"] = row["four"] / row["spline_n9"]
        row["ratio_four15"] = row["four15"] / row["spline_n9"]
        row["ratio_linear"] = row["linear"] / row["spline"]
        rows.append(row)
        _say(f"  T/{div:<5d} {steady.method:8s} {steady.periods_simulated:3d} periods, "
             f"{row['engine_points_per_period']:5d} points/period: spline {row['spline']:.2e}, "
             f"linear {row['linear']:.2e}, .four {row['four']:.2e}, fourier(15 digits) "
             f"{row['four15']:.2e}; engine points {points_err:.1e}, spline/linear on exact "
             f"values {row['spline_exact_points']:.1e}/{row['linear_exact_points']:.1e} "
             f"({wall:.1f} s)")
    tm = [r["tmax_s"] for r in rows]
    slopes = {k: slope(tm, [r[k] for r in rows])
              for k in ("spline", "linear", "four", "four15", "points", "spline_exact_points",
                        "linear_exact_points")}
    _say("  slope of log(error) vs log(TMAX): " + ", ".join(f"{k} {s:.2f}" for k, s in slopes.items()))
    _say(f"  engine fourier settings: {rows[0]['four_header']}")
    return {"circuit": kind, "file": str(path.relative_to(ROOT)), "parameters": params,
            "model": model, "rows": rows, "slopes": slopes, "example_deck": example_deck}


def print_tables(out: list[dict[str, Any]]) -> None:
    for c in out:
        _say(f"\n-- {c['circuit']}: error = max_n |dC_n| / max|C_ref| (simloop n <= 10; "
             "engine fourier and ratios n <= 9)")
        _say(f"   {'TMAX':>7s} {'spline':>9s} {'linear':>9s} {'lin/spl':>8s} {'.four':>9s} "
             f"{'four15':>9s} {'.four/spl':>10s} {'four15/spl':>11s} {'>=10x':>6s}")
        for r in c["rows"]:
            ok = "PASS" if r["ratio_four15"] >= TARGET_RATIO else "MISS"
            _say(f"   T/{r['tmax_divisor']:<5d} {r['spline']:9.2e} {r['linear']:9.2e} "
                 f"{r['ratio_linear']:8.1f} {r['four']:9.2e} {r['four15']:9.2e} "
                 f"{r['ratio_four']:10.0f} {r['ratio_four15']:11.0f} {ok:>6s}")
        s = c["slopes"]
        _say(f"   slope   {s['spline']:9.2f} {s['linear']:9.2f} {'':8s} {s['four']:9.2f} "
             f"{s['four15']:9.2f}")
        _say(f"   {'TMAX':>7s} {'points':>9s} {'spl@exact':>10s} {'lin@exact':>10s}   (error of "
             "the engine's points; resampling alone, on exact values at the same instants)")
        for r in c["rows"]:
            _say(f"   T/{r['tmax_divisor']:<5d} {r['points']:9.2e} {r['spline_exact_points']:10.2e} "
                 f"{r['linear_exact_points']:10.2e}")
        _say(f"   slope   {s['points']:9.2f} {s['spline_exact_points']:10.2f} "
             f"{s['linear_exact_points']:10.2f}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--circuits", default=",".join(NAMES),
                        help="comma-separated subset of " + ", ".join(NAMES))
    parser.add_argument("--json", type=Path, help="also write the figures to this file")
    args = parser.parse_args(argv)
    os.environ.setdefault("NGSPICE_LIBRARY_PATH", "libngspice.so.0")
    if shutil.which("ngspice") is None:
        _say("ngspice is not on PATH: install the ngspice package")
        return 2
    from simloop.engine import EnginePool

    keys = [k.strip() for k in args.circuits.split(",") if k.strip()]
    unknown = [k for k in keys if k not in NAMES]
    if unknown:
        parser.error(f"unknown circuit(s) {', '.join(unknown)}; choose from {', '.join(NAMES)}")
    info = machine()
    _say("machine: " + ", ".join(f"{k} {v}" for k, v in info.items()))
    workdir = Path(tempfile.mkdtemp(prefix="simloop-bench-accuracy-"))
    try:
        with EnginePool(1, max_tasks_per_child=NO_RECYCLING) as pool:
            out = [bench_circuit(k, pool, workdir) for k in keys]
    finally:
        shutil.rmtree(workdir, ignore_errors=True)
    print_tables(out)
    if args.json:
        args.json.write_text(json.dumps({"machine": info, "circuits": out}, indent=2))
        _say(f"\nfigures written to {args.json}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
