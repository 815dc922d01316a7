"""Steady-state benchmark: simloop against a plain long transient run by hand in ``ngspice -b``.

Prints figures; asserts nothing and is never run by the tests. For three slow-settling circuits
(built here, invented values; every diode model has only IS, N and RS):

``supply``
    half-wave rectifier into a 100 uF reservoir behind a 1 kOhm limiting resistor, 100 kOhm
    load, 10 V at 50 Hz (one storage element; settles in hundreds of periods).
``multiplier``
    three-stage Cockcroft-Walton multiplier, six 1 uF capacitors, 100 Ohm source, 1 MOhm load,
    10 V at 1 kHz (six storage elements).
``detector``
    diode detector at 10 MHz (1 V, 50 Ohm) into 100 pF || 10 kOhm, then an RC video filter of
    90 kOhm and 1 nF (time constant about 1000 periods; two storage elements).

For each circuit:

1. **By hand**: a batch netlist of our own (``.tran TMAX P*T (P-2)*T TMAX`` plus a ``.control``
   block with ``run`` and ``wrdata``, ``numdgt=15``) run with ``ngspice -b``; the harmonics of
   the last period come from :func:`simloop.fourier.spectrum_from_samples`. P is doubled from 8
   until the harmonics change by at most the steady-state tolerance (1e-6 of the largest
   component, simloop's default) from P/2 to P. TMAX is simloop's default, T/2000.
2. **simloop**: :func:`simloop.analyse.run_circuit` with default settings, ``method`` = auto,
   shoot and settle, on a warm engine pool of one worker (worker start-up is outside the clock).
3. **Error** against an independent answer: for ``supply`` the first-principles reference of
   ``tests/reference`` (``half_wave_capacitor``: solve_ivp plus Newton shooting, Shockley
   junction with GMIN); for ``multiplier`` and ``detector``, where no such reference exists, a
   plain transient of the same length P with a 4x tighter TMAX (T/8000, 16x less
   discretisation error) run the same way. Error = max over n <= 10 of
   ``|C_n - C_n(ref)| / max |C(ref)|`` (complex amplitudes, so phases count).

One figure beyond the defaults: ``shoot`` on a pool of two workers (``shoot-2w``; the
Jacobian's runs go out as one parallel batch), skipped with ``--no-two-workers``.

Wall times are medians over ``--repeats`` runs (after one untimed warm-up run per circuit) (the plain transients of the doubling search
are timed once each); CPU seconds are summed over this process and its children (engine
workers, ngspice) so that other load on the machine shows.

Run from the repository root::

    .venv/bin/python bench/steady_state.py                      # all three, ~25 min
    .venv/bin/python bench/steady_state.py --circuits supply    # one circuit
    .venv/bin/python bench/steady_state.py --json steady.json

Targets: at least 10x less wall time than the plain transient, at most 5 period-equivalents
of engine work (``steady_state.engine_periods``). Engine workers are spawned: everything runs
under the ``__main__`` guard below.
"""

from __future__ import annotations

import os
import sys

_BLAS_VARS = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")
if __name__ == "__main__":
    for _name in _BLAS_VARS:
        os.environ.setdefault(_name, "1")  # before numpy is imported; workers inherit it

import argparse  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import resource  # noqa: E402
import shutil  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from concurrent.futures import ThreadPoolExecutor  # noqa: E402
from dataclasses import dataclass, field  # noqa: E402
from pathlib import Path  # noqa: E402
from typing import Any  # noqa: E402
from benchinfo import machine

ROOT = Path(__file__).resolve().parent.parent
HARMONICS = 10
TOLERANCE = 1e-6  # simloop's default SteadySettings.tolerance
TARGET_SPEEDUP = 10.0
TARGET_PERIODS = 5
FIRST_PERIODS = 8
MAX_PERIODS = 65536
REF_TMAX_FACTOR = 4  # the long-transient reference uses TMAX / 4
METHODS = ("auto", "shoot", "settle")
#: Engine workers are recycled after this many runs by default (50). Python 3.11's
#: ProcessPoolExecutor deadlocks when a worker retires with runs still queued (CPython
#: gh-115634), which shooting's parallel batches trigger; the bench switches recycling off.
NO_RECYCLING = 10**9


@dataclass(frozen=True)
class Case:
    """One benchmark circuit: text without analysis cards, fundamental, reference kind."""

    key: str
    title: str
    netlist: str
    f0: float
    states: int
    exact: dict[str, float] | None = None  # parameters of ref.half_wave_capacitor


CASES: dict[str, Case] = {
    "supply": Case(
        key="supply",
        title="light-load supply (half-wave, rs 1 k, C 100 uF, RL 100 k, 50 Hz)",
        netlist="""* light-load supply behind a limiting resistor (model: IS, N, RS only)
.param vm=10 f=50 rs=1k rl=100k c=100u
V1 src 0 SIN(0 {vm} {f})
Rs src a {rs}
D1 a out dsup
Rl out 0 {rl}
C1 out 0 {c}
.model dsup D(IS=2.5e-9 N=1.75 RS=0.5)
""",
        f0=50.0,
        states=1,
        exact=dict(vm=10.0, freq=50.0, rs=1e3, rl=1e5, c=1e-4, is_=2.5e-9, n=1.75, rser=0.5),
    ),
    "multiplier": Case(
        key="multiplier",
        title="3-stage multiplier (6 x 1 uF, rs 100, RL 1 M, 1 kHz)",
        netlist="""* three-stage Cockcroft-Walton multiplier, six capacitors, light load
.param vm=10 f=1k rs=100 c=1u rl=1meg
V1 src 0 SIN(0 {vm} {f})
Rs src a {rs}
C1 a n1 {c}
D1 0 n1 dmul
D2 n1 n2 dmul
C2 n2 0 {c}
C3 n1 n3 {c}
D3 n2 n3 dmul
D4 n3 n4 dmul
C4 n4 n2 {c}
C5 n3 n5 {c}
D5 n4 n5 dmul
D6 n5 out dmul
C6 out n4 {c}
Rl out 0 {rl}
.model dmul D(IS=2.5e-9 N=1.75 RS=0.5)
""",
        f0=1e3,
        states=6,
    ),
    "detector": Case(
        key="detector",
        title="RF detector, 10 MHz, video filter 90 k x 1 nF (~1000 periods)",
        netlist="""* RF diode detector at 10 MHz with an RC video filter (model: IS, N, RS only)
.param vm=1 f=10meg rs=50 cd=100p rd=10k rv=90k cv=1n
V1 src 0 SIN(0 {vm} {f})
Rs src a {rs}
D1 a det ddet
Cd det 0 {cd}
Rd det 0 {rd}
Rv det out {rv}
Cv out 0 {cv}
.model ddet D(IS=5e-8 N=1.05 RS=10)
""",
        f0=10e6,
        states=2,
    ),
}


# ------------------------------------------------------------------------------ measuring
def _say(text: str = "") -> None:
    print(text, flush=True)


def _child_pids() -> list[int]:
    pids: list[int] = []
    for task in os.listdir("/proc/self/task"):
        try:
            with open(f"/proc/self/task/{task}/children", encoding="ascii") as fh:
                pids += [int(p) for p in fh.read().split()]
        except OSError:
            continue
    return pids


def _proc_cpu(pid: int) -> float:
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii") as fh:
            fields = fh.read().rsplit(")", 1)[1].split()
        return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")
    except (OSError, IndexError, ValueError):
        return 0.0


def cpu_seconds() -> float:
    """CPU time of this process, its waited-for children (ngspice -b) and its live children
    (engine workers) [s]."""
    own = time.process_time()
    done = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own + done.ru_utime + done.ru_stime + sum(_proc_cpu(p) for p in _child_pids())


def _load() -> str:
    return " ".join(f"{x:.2f}" for x in os.getloadavg())


def complex_amplitudes(spectrum: Any) -> Any:
    import numpy as np

    c = np.asarray(spectrum.amplitude) * np.exp(-1j * np.asarray(spectrum.phase_rad))
    c[0] = spectrum.amplitude[0]
    return c


def relative_error(c: Any, ref: Any) -> float:
    import numpy as np

    n = min(len(c), len(ref))
    return float(np.max(np.abs(np.asarray(c)[:n] - np.asarray(ref)[:n])) / np.max(np.abs(ref)))


# ------------------------------------------------------------------------------ by hand
@dataclass
class BatchRun:
    periods: int
    tmax: float
    wall: float
    cpu: float
    c: Any = field(repr=False)
    points: int = 0


def batch_deck(case: Case, periods: int, tmax: float, data_file: Path) -> str:
    """Our own batch netlist: the circuit, ``.tran`` keeping the last 2 periods, a .control
    block writing v(out) with 15 digits."""
    period = 1.0 / case.f0
    stop = periods * period
    start = (periods - 2) * period
    return (case.netlist.rstrip("\n")
            + f"\n.tran {tmax!r} {stop!r} {start!r} {tmax!r}\n"
            + ".control\nset numdgt=15\nset wr_singlescale\nrun\n"
            + f"wrdata {data_file} v(out)\n.endc\n.end\n")


def run_batch(case: Case, periods: int, tmax: float, workdir: Path, *, tag: str = "") -> BatchRun:
    """One plain transient in ``ngspice -b`` and the harmonics of its last period (timed)."""
    import numpy as np

    from simloop.fourier import spectrum_from_samples

    stem = f"{case.key}-{periods}-{tag or 'run'}"
    deck = workdir / f"{stem}.cir"
    data = workdir / f"{stem}.dat"
    deck.write_text(batch_deck(case, periods, tmax, data))
    cpu0, t0 = cpu_seconds(), time.perf_counter()
    proc = subprocess.run(["ngspice", "-b", str(deck)], capture_output=True, text=True)
    # ngspice 39 -b exits with 1 after a .control-only deck ("no simulations run"): judge the
    # data file instead of the exit status
    if not data.exists():
        raise RuntimeError(f"ngspice -b {deck} wrote no data: {proc.stdout[-300:]}"
                           f"{proc.stderr[-300:]}")
    raw = np.loadtxt(data, ndmin=2)
    t, v = raw[:, 0], raw[:, 1]
    keep = np.concatenate(([True], np.diff(t) > 0))
    spectrum = spectrum_from_samples(t[keep], v[keep], fundamental_hz=case.f0,
                                     harmonics=HARMONICS, periods=1, method="spline")
    wall, cpu = time.perf_counter() - t0, cpu_seconds() - cpu0
    if t[-1] < periods / case.f0 * (1 - 1e-9):
        raise RuntimeError(f"ngspice -b {deck} stopped at t = {t[-1]:g} s: {proc.stderr[-300:]}")
    data.unlink()
    return BatchRun(periods, tmax, wall, cpu, complex_amplitudes(spectrum), int(keep.sum()))


def doubling_search(case: Case, tmax: float, workdir: Path) -> tuple[list[BatchRun], list[float]]:
    """Double P from :data:`FIRST_PERIODS` until the last period's harmonics change by at most
    :data:`TOLERANCE` (relative to the largest component) from P/2 to P."""
    runs: list[BatchRun] = []
    changes: list[float] = []
    periods = FIRST_PERIODS
    while periods <= MAX_PERIODS:
        run = run_batch(case, periods, tmax, workdir)
        runs.append(run)
        change = math.inf if len(runs) == 1 else relative_error(runs[-2].c, run.c)
        changes.append(change)
        _say(f"  by hand  P = {periods:6d}: {run.wall:8.2f} s wall, change from P/2 "
             f"{change:.1e}")
        if change <= TOLERANCE:
            break
        periods *= 2
    return runs, changes


# ------------------------------------------------------------------------------ simloop
@dataclass
class SimloopRun:
    method: str
    walls: list[float]
    cpus: list[float]
    figures: dict[str, Any]
    runs: int
    engine_time: float
    c: Any = field(repr=False)
    converged: bool = True


def count_requests(pool: Any) -> dict[str, float]:
    """Wrap ``pool.submit`` to count engine runs and sum their in-worker time."""
    tally = {"runs": 0, "engine_time": 0.0}
    inner = pool.submit

    def submit(request):
        future = inner(request)
        tally["runs"] += 1

        def done(f):
            if not f.cancelled() and f.exception() is None:
                tally["engine_time"] += f.result().wall_time

        future.add_done_callback(done)
        return future

    pool.submit = submit
    return tally


def run_simloop(path: Path, method: str, pool: Any, tally: dict[str, float], *,
                repeats: int) -> SimloopRun:
    from simloop.analyse import RunSettings, run_circuit
    from simloop.steady import SteadySettings

    settings = RunSettings(harmonics=HARMONICS, probe="v(out)",
                           steady=SteadySettings(method=method))
    walls, cpus = [], []
    result = None
    for _ in range(repeats):
        tally["runs"], tally["engine_time"] = 0, 0.0
        cpu0, t0 = cpu_seconds(), time.perf_counter()
        result = run_circuit(path, settings=settings, pool=pool)
        walls.append(time.perf_counter() - t0)
        cpus.append(cpu_seconds() - cpu0)
    assert result is not None
    return SimloopRun(method, walls, cpus, result.steady.figures(), int(tally["runs"]),
                      float(tally["engine_time"]), complex_amplitudes(result.simulated),
                      bool(result.converged))


# ------------------------------------------------------------------------------ references
def exact_reference(case: Case) -> Any:
    sys.path.insert(0, str(ROOT / "tests"))
    from reference import rectifiers as ref

    import numpy as np

    sol = ref.half_wave_capacitor(**case.exact, harmonics=HARMONICS)
    c = np.asarray(sol.amp) * np.exp(-1j * np.asarray(sol.phase))
    c[0] = sol.a0
    return c


def breakdown(method: str, figures: dict[str, Any], states: int) -> str:
    """Where the period-equivalents went."""
    total = figures["engine_periods"]
    if figures["method"] == "shooting":
        first = 4 if method == "shoot" else 12
        shoot_runs = total - first - 3
        return (f"{first} first guess + {shoot_runs} shooting (m = {states}, "
                f"{figures['shooting_iterations']} iterations) + 3 check")
    if figures.get("fallback"):
        return f"fallback to settling ({figures['periods_simulated']} periods in the last attempt)"
    return f"{figures['attempts']} settling attempts, last {figures['periods_simulated']} periods"


# ------------------------------------------------------------------------------ main

def bench_case(case: Case, pool: Any, tally: dict[str, float], workdir: Path, *,
               repeats: int, settle_repeats: int, pool2: Any = None,
               tally2: dict[str, float] | None = None) -> dict[str, Any]:
    from simloop.steady import default_tmax

    tmax = default_tmax(case.f0, HARMONICS)
    path = workdir / f"{case.key}.cir"
    path.write_text(case.netlist + ".end\n")
    _say(f"\n== {case.key}: {case.title}; TMAX = T/{round(1 / (case.f0 * tmax))}, "
         f"load {_load()}")
    run_simloop(path, "shoot", pool, tally, repeats=1)  # warm-up (first-call imports), untimed
    sims = {}
    for method in METHODS:
        n = settle_repeats if method == "settle" else repeats
        sims[method] = run_simloop(path, method, pool, tally, repeats=n)
        f = sims[method].figures
        _say(f"  simloop {method:6s}: {statistics.median(sims[method].walls):7.2f} s wall, "
             f"{f['engine_periods']} period-equivalents, {sims[method].runs} engine runs, "
             f"method {f['method']}, converged {f['converged']}")
    if pool2 is not None:  # not a default setting: the shooting batches on two workers
        run_simloop(path, "shoot", pool2, tally2, repeats=1)
        sims["shoot-2w"] = run_simloop(path, "shoot", pool2, tally2, repeats=repeats)
        _say(f"  simloop shoot on 2 workers: {statistics.median(sims['shoot-2w'].walls):7.2f} s")
    runs, changes = doubling_search(case, tmax, workdir)
    return {"case": case, "tmax": tmax, "sims": sims, "runs": runs, "changes": changes}


def add_reference(entry: dict[str, Any], workdir: Path) -> None:
    case: Case = entry["case"]
    needed = entry["runs"][-1].periods
    if case.exact is not None:
        entry["ref"] = exact_reference(case)
        entry["ref_kind"] = "tests/reference half_wave_capacitor (solve_ivp + shooting)"
    else:
        tmax = entry["tmax"] / REF_TMAX_FACTOR
        run = run_batch(case, needed, tmax, workdir, tag="ref")
        entry["ref"] = run.c
        entry["ref_kind"] = (f"plain transient, {needed} periods, TMAX = T/"
                             f"{round(1 / (case.f0 * tmax))} ({run.wall:.0f} s)")
        entry["ref_wall"] = run.wall


def report(entry: dict[str, Any]) -> dict[str, Any]:
    case: Case = entry["case"]
    ref = entry["ref"]
    runs: list[BatchRun] = entry["runs"]
    final = runs[-1]
    converged = entry["changes"][-1] <= TOLERANCE
    half = runs[-2] if len(runs) > 1 else final
    search_wall = sum(r.wall for r in runs)
    rows = []
    hand_err = relative_error(final.c, ref)
    _say(f"\n-- {case.key}: reference = {entry['ref_kind']}")
    _say(f"   {'approach':28s} {'wall s':>8s} {'CPU s':>8s} {'periods':>8s} {'eq.per.':>8s} "
         f"{'runs':>5s} {'error':>9s} {'x (P)':>8s} {'x (P/2)':>8s} {'10x':>5s} {'<=5':>5s}")
    _say(f"   {'plain transient P=' + str(final.periods):28s} {final.wall:8.2f} {final.cpu:8.2f} "
         f"{final.periods:8d} {final.periods:8d} {1:5d} {hand_err:9.1e}"
         + ("" if converged else "   (did not settle)"))
    _say(f"   {'  (doubling search total)':28s} {search_wall:8.2f} "
         f"{sum(r.cpu for r in runs):8.2f} {'':8s} {sum(r.periods for r in runs):8d} "
         f"{len(runs):5d}")
    _say(f"   {'  (P/2 = ' + str(half.periods) + ' alone)':28s} {half.wall:8.2f} {half.cpu:8.2f} "
         f"{half.periods:8d} {half.periods:8d} {1:5d} {relative_error(half.c, ref):9.1e}")
    for method, sim in entry["sims"].items():
        wall = statistics.median(sim.walls)
        cpu = statistics.median(sim.cpus)
        f = sim.figures
        err = relative_error(sim.c, ref)
        speedup = final.wall / wall
        rows.append({
            "method": method, "wall_s": wall, "walls_s": sim.walls, "cpu_s": cpu,
            "cpus_s": sim.cpus,
            "found_by": f["method"], "converged": f["converged"],
            "periods_simulated": f["periods_simulated"], "engine_periods": f["engine_periods"],
            "engine_runs": sim.runs, "engine_time_s": sim.engine_time,
            "shooting_iterations": f["shooting_iterations"],
            "shooting_residual": f["shooting_residual"], "fallback": f["fallback"],
            "error": err, "speedup": speedup, "speedup_vs_half": half.wall / wall,
            "speedup_pass": speedup >= TARGET_SPEEDUP,
            "periods_pass": f["engine_periods"] <= TARGET_PERIODS,
            "breakdown": breakdown(method.removesuffix("-2w"), f, case.states),
        })
        r = rows[-1]
        _say(f"   {'simloop ' + method + ' (' + f['method'] + ')':28s} {wall:8.2f} {cpu:8.2f} "
             f"{f['periods_simulated']:8d} {f['engine_periods']:8d} {sim.runs:5d} {err:9.1e} "
             f"{speedup:7.1f}x {r['speedup_vs_half']:7.1f}x "
             f"{'PASS' if r['speedup_pass'] else 'MISS':>5s} "
             f"{'PASS' if r['periods_pass'] else 'MISS':>5s}")
    for r in rows:
        _say(f"     {r['method']}: {r['breakdown']}; engine time {r['engine_time_s']:.2f} s "
             f"in {r['engine_runs']} runs" + (f"; {r['fallback']}" if r["fallback"] else ""))
    return {
        "circuit": case.key, "title": case.title, "states": case.states,
        "netlist": case.netlist, "tmax_s": entry["tmax"], "reference": entry["ref_kind"],
        "plain": {"periods_needed": final.periods, "settled": converged,
                  "wall_s": final.wall, "cpu_s": final.cpu, "error": hand_err,
                  "search_wall_s": search_wall,
                  "search": [{"periods": r.periods, "wall_s": r.wall, "cpu_s": r.cpu,
                              "change": ch} for r, ch in zip(runs, entry["changes"])],
                  "half_periods": half.periods, "half_wall_s": half.wall,
                  "half_error": relative_error(half.c, ref)},
        "simloop": rows,
    }


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--circuits", default=",".join(CASES),
                        help="comma-separated subset of " + ", ".join(CASES))
    parser.add_argument("--repeats", type=int, default=3,
                        help="repeats of each simloop auto/shoot run (median reported)")
    parser.add_argument("--settle-repeats", type=int, default=1,
                        help="repeats of the (slow) settle runs")
    parser.add_argument("--no-two-workers", action="store_true",
                        help="skip the extra shoot measurement on a pool of two workers")
    parser.add_argument("--json", type=Path, help="also write the figures to this file")
    args = parser.parse_args(argv)

    os.environ.setdefault("NGSPICE_LIBRARY_PATH", "libngspice.so.0")
    from simloop.engine import EnginePool, TransientRequest

    if shutil.which("ngspice") is None:
        _say("ngspice is not on PATH: install the ngspice package")
        return 2
    info = machine()
    keys = [k.strip() for k in args.circuits.split(",") if k.strip()]
    unknown = [k for k in keys if k not in CASES]
    if unknown:
        parser.error(f"unknown circuit(s) {', '.join(unknown)}; choose from {', '.join(CASES)}")
    _say("machine: " + ", ".join(f"{k} {v}" for k, v in info.items()))
    workdir = Path(tempfile.mkdtemp(prefix="simloop-bench-steady-"))
    entries = []
    try:
        with EnginePool(1, max_tasks_per_child=NO_RECYCLING) as pool, \
                EnginePool(2, max_tasks_per_child=NO_RECYCLING) as pool2:
            warm = TransientRequest("warm-up\nV1 a 0 SIN(0 1 1k)\nR1 a 0 1k",
                                    stop=1e-3, step=1e-6, tmax=1e-6)
            pool.run(warm)  # start the worker before any clock runs
            for future in [pool2.submit(warm) for _ in range(4)]:
                future.result()
            tally = count_requests(pool)
            tally2 = count_requests(pool2)
            for key in keys:
                entries.append(bench_case(CASES[key], pool, tally, workdir,
                                          repeats=args.repeats,
                                          settle_repeats=args.settle_repeats,
                                          pool2=None if args.no_two_workers else pool2,
                                          tally2=tally2))
        # references are not timed: run the long transients two at a time
        _say(f"\nreferences (not timed), load {_load()} ...")
        with ThreadPoolExecutor(2) as threads:
            list(threads.map(lambda e: add_reference(e, workdir), entries))
        out = [report(e) for e in entries]
    finally:
        shutil.rmtree(workdir, ignore_errors=True)
    if args.json:
        args.json.write_text(json.dumps({"machine": info, "tolerance": TOLERANCE,
                                         "targets": {"speedup": TARGET_SPEEDUP,
                                                     "engine_periods": TARGET_PERIODS},
                                         "circuits": out}, indent=2, default=float))
        _say(f"\nfigures written to {args.json}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
