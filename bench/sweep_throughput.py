"""Sweep benchmark: throughput on 1 and 2 engine workers, simloop's overhead per point, memory.

Prints figures; asserts nothing and is never run by the tests. Three measurements (issue 4):

1. Throughput. A 24-point grid on the built-in ``half-wave`` circuit at 50 Hz (rload 6 values
   log 50..5k x vpk 6, 12, 24, 48 V; default settings, 10 harmonics) through
   :func:`simloop.sweep.run_sweep` with ``workers=1`` and ``workers=2``, no store, after a
   warm-up; each repeated ``--repeats`` times (default 5), median and spread reported. Two
   variants: as a user sees it (``run_sweep`` starts its own engine pool, so worker start-up is
   inside the wall time) and with the pool's workers started before the clock runs (start-up
   excluded). Each run also reports the CPU time of this process and of the engine workers,
   and the CPU other processes used meanwhile (from /proc/stat): on a shared machine only the
   runs that others left undisturbed (they used at most 0.25 cores beyond the ones simloop
   left free) give a fair speed-up, and that figure is printed beside the plain median.
2. Overhead. The same 24 points with ``workers=1``: each point's wall time in ``simulate_point``
   against the bare engine time of the same transients, obtained by recording every
   TransientRequest the point sent (recorded at ``EnginePool.submit`` of the sweep's pool, which
   both ``run_transient`` and the shooting path's direct submissions go through) and replaying
   them through a fresh :class:`simloop.engine.EnginePool` (sum of ``Trace.wall_time``). The
   simloop-side time is broken down by wrapping the stages ``run_circuit`` calls.
3. Memory. ``--points-memory`` points (default 1000) of the ``switching-stage`` circuit through
   ``run_sweep`` with ``workers=1`` and a results store in a temporary folder; the resident set
   (VmRSS) of this process and of the engine worker is read every 50 points. The pool is the
   one run_sweep builds (the engine's default ``max_tasks_per_child``); ``--memory-compare``
   runs the sweep once more with the other recycling choice (every 50 transients if the
   default keeps its workers, none otherwise), to tell a leak from the recycling's effect.

Run from the repository root::

    .venv/bin/python bench/sweep_throughput.py               # full run, a few minutes
    .venv/bin/python bench/sweep_throughput.py --quick       # smoke run
    .venv/bin/python bench/sweep_throughput.py --points-memory 300 --json figures.json

BLAS threads: OPENBLAS_NUM_THREADS, OMP_NUM_THREADS and MKL_NUM_THREADS are set to 1 in this
process's environment before numpy is imported (engine workers inherit it), unless
``--no-blas-limit`` is given. The full run also repeats the throughput measurement in a child
process without the limit (``--no-unlimited`` skips that).

Engine workers are spawned: everything runs under the ``__main__`` guard below.
"""

from __future__ import annotations

import os
import sys

_BLAS_VARS = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS")
if __name__ == "__main__" and "--no-blas-limit" not in sys.argv:
    for _name in _BLAS_VARS:
        os.environ[_name] = "1"  # before numpy is imported, or OpenBLAS ignores it

import argparse  # noqa: E402
import contextlib  # noqa: E402
import cProfile  # noqa: E402
import functools  # noqa: E402
import io  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import platform  # noqa: E402
import pstats  # noqa: E402
import resource  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import tempfile  # noqa: E402
import threading  # noqa: E402
import time  # noqa: E402
from collections import defaultdict  # noqa: E402
from collections.abc import Callable, Iterator  # noqa: E402
from pathlib import Path  # noqa: E402
from typing import Any  # noqa: E402

import numpy as np  # noqa: E402

import simloop.analyse as analyse_mod  # noqa: E402
import simloop.engine as engine_mod  # noqa: E402
import simloop.ideal as ideal_mod  # noqa: E402
import simloop.steady as steady_mod  # noqa: E402
import simloop.sweep as sweep_mod  # noqa: E402
from simloop.analyse import RunResult, RunSettings, run_circuit  # noqa: E402
from simloop.netlist import CircuitTemplate, load_circuit  # noqa: E402
from simloop.store import ResultStore  # noqa: E402
from simloop.sweep import expand_grid, parse_vary, run_sweep  # noqa: E402

#: Targets of issue 4.
TARGET_SPEEDUP = 1.8
TARGET_OVERHEAD = 0.10
TARGET_MEMORY_MB = 50.0

#: A run during which other processes used at most this many cores counts as undisturbed.
_CLEAN_CORES = 0.25

_ORIGINAL_POOL = engine_mod.EnginePool
_WARM_NETLIST = "warm-up divider\nV1 in 0 1\nR1 in out 1k\nR2 out 0 1k"


# ------------------------------------------------------------------------------- helpers
def _say(text: str = "") -> None:
    print(text, flush=True)


def _load() -> str:
    one, five, fifteen = os.getloadavg()
    return f"{one:.2f} {five:.2f} {fifteen:.2f}"


def _cpu_ticks() -> tuple[int, int]:
    """(idle, total) jiffies of all CPUs, from /proc/stat."""
    with open("/proc/stat", encoding="ascii") as fh:
        fields = [int(x) for x in fh.readline().split()[1:]]
    return fields[3] + fields[4], sum(fields[:8])


def _idle_cores(window: float = 1.0) -> float:
    """Idle CPU over the next ``window`` seconds, in cores (2.0 = both cores idle)."""
    idle0, total0 = _cpu_ticks()
    time.sleep(window)
    idle1, total1 = _cpu_ticks()
    return (os.cpu_count() or 1) * (idle1 - idle0) / max(1, total1 - total0)


_QUIET_WAIT = [0.0]  # [s] set by --quiet-wait


def _machine_state() -> str:
    """Load average and idle cores just before a timed run; waits for a quiet machine if asked.

    The machine may be shared: with ``--quiet-wait S`` this waits up to S seconds for 1.8 of
    the 2 cores (90 % of all cores) to be idle over one second.
    """
    deadline = time.monotonic() + _QUIET_WAIT[0]
    idle = _idle_cores()
    while idle < 0.9 * (os.cpu_count() or 1) and time.monotonic() < deadline:
        idle = _idle_cores()
    return f"load {_load()}, idle {idle:.2f} cores"


def _cpu_s(pid: int) -> float:
    """User + system CPU time of a live process [s], from /proc/<pid>/stat; 0 if it has gone."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii") as fh:
            fields = fh.read().rpartition(")")[2].split()
    except OSError:
        return 0.0
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def _rss_mb(pid: int) -> float | None:
    """VmRSS of a process [MB], from /proc/<pid>/status; None if it has gone."""
    try:
        with open(f"/proc/{pid}/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmRSS:"):
                    return int(line.split()[1]) / 1024.0
    except OSError:
        return None
    return None


def _spread(values: list[float]) -> dict[str, float]:
    return {"median": statistics.median(values), "min": min(values), "max": max(values)}


def _cpu_model() -> str:
    try:
        with open("/proc/cpuinfo", encoding="ascii", errors="replace") as fh:
            for line in fh:
                if line.startswith("model name"):
                    return line.partition(":")[2].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def _versions() -> dict[str, str]:
    import scipy

    try:
        from importlib.metadata import version

        pyspice = version("PySpice")
    except Exception:  # noqa: BLE001 - report only
        pyspice = "unknown"
    return {
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "PySpice": pyspice,
        "ngspice": engine_mod.engine_version(),
    }


def _start_workers(pool: Any, workers: int) -> float:
    """Spawn all of ``pool``'s workers now (one trivial run each, concurrently); seconds taken."""
    request = engine_mod.TransientRequest(_WARM_NETLIST, stop=1e-6, step=1e-7, tmax=1e-7)
    started = time.perf_counter()
    futures = [_ORIGINAL_POOL.submit(pool, request) for _ in range(workers)]
    for future in futures:
        future.result()
    return time.perf_counter() - started


_KEEP = object()  # max_tasks: leave the pool's own max_tasks_per_child


def _default_max_tasks() -> Any:
    import inspect

    parameter = inspect.signature(_ORIGINAL_POOL.__init__).parameters.get("max_tasks_per_child")
    return None if parameter is None else parameter.default


def _recycling(max_tasks: Any) -> str:
    return ("no recycling" if max_tasks is None or max_tasks >= 10**6
            else f"workers recycled every {max_tasks} transients")


@contextlib.contextmanager
def _pool_class(*, prestart: bool, max_tasks: Any = _KEEP,
                recorder: Callable[[Any, Any], None] | None = None) -> Iterator[list[Any]]:
    """Make run_sweep's ``EnginePool(n)`` a recorded pool, optionally pre-started.

    run_sweep imports EnginePool from simloop.engine when called, so replacing the module
    attribute reaches it. Yields the list of pools created (with ``startup_s`` on each).
    ``recorder(request, future)`` sees every request submitted to the pool: both
    ``run_transient`` (plain settling) and the shooting path's direct ``submit`` go through it.
    """
    created: list[Any] = []

    class _BenchPool(_ORIGINAL_POOL):
        def __init__(self, workers: int = 1, **kwargs: Any) -> None:
            if max_tasks is not _KEEP:
                kwargs["max_tasks_per_child"] = max_tasks
            super().__init__(workers, **kwargs)
            self.startup_s = _start_workers(self, workers) if prestart else 0.0
            # CPU the workers spent starting (interpreter, imports, ngspice), for CPU per point
            self.startup_cpu_s = sum(_cpu_s(pid) for pid in _worker_pids(self)) if prestart else 0.0
            self.close_s = 0.0
            created.append(self)

        def submit(self, request: Any) -> Any:
            future = super().submit(request)
            if recorder is not None:
                recorder(request, future)
            return future

        def close(self) -> None:
            t0 = time.perf_counter()
            try:
                super().close()
            finally:
                self.close_s += time.perf_counter() - t0

    engine_mod.EnginePool = _BenchPool
    try:
        yield created
    finally:
        engine_mod.EnginePool = _ORIGINAL_POOL


def _worker_pids(pool: Any) -> list[int]:
    generation = pool._current
    if generation is None:
        return []
    return [pid for pid, proc in list(generation.processes.items()) if proc.is_alive()]


# ------------------------------------------------------------------------------- grids
def throughput_grid(points: int) -> tuple[CircuitTemplate, list[dict[str, Any]], dict[str, float]]:
    """half-wave at 50 Hz: rload log 50..5k x vpk 6, 12, 24, 48 V (24 points), or fewer."""
    template = load_circuit("half-wave")
    loads = 6 if points >= 24 else max(1, points // 4)
    varies = [parse_vary(f"rload=50:5k:{loads}:log", template),
              parse_vary("vpk=6,12,24,48", template)]
    grid = expand_grid(varies)[:points]
    return template, grid, {"freq": 50.0}


def memory_grid(points: int) -> tuple[CircuitTemplate, list[dict[str, Any]], dict[str, float]]:
    """switching-stage at its default 1 MHz: duty 0.05..0.95 (40) x rload log 1..100 ohm."""
    template = load_circuit("switching-stage")
    loads = max(1, math.ceil(points / 40))
    varies = [parse_vary(f"rload=1:100:{loads}:log", template) if loads > 1
              else parse_vary("rload=10", template),
              parse_vary("duty=0.05:0.95:40", template)]
    grid = expand_grid(varies, max_points=max(1000, 40 * loads))[:points]
    return template, grid, {}


def _statuses(outcome: Any) -> dict[str, int]:
    counts: dict[str, int] = defaultdict(int)
    for point in outcome.points:
        counts[point["status"]] += 1
    return dict(counts)


# ------------------------------------------------------------------------------- 1. throughput
def measure_throughput(points: int, repeats: int) -> dict[str, Any]:
    template, grid, fixed = throughput_grid(points)
    settings = RunSettings(harmonics=10)
    _say(f"\n== 1. throughput: {template.name}, {len(grid)} points (rload x vpk, freq 50 Hz), "
         f"harmonics 10, no store, {repeats} repeats")
    # warm-up: imports, file cache, engine version cached, both workers' code paths
    t0 = time.perf_counter()
    run_sweep(template, grid[:2], fixed_values=fixed, settings=settings, workers=2)
    _say(f"   warm-up (2 points, 2 workers): {time.perf_counter() - t0:.2f} s")
    result: dict[str, Any] = {"points": len(grid), "circuit": template.name, "variants": {}}
    for variant, prestart in (("as run_sweep runs (worker start-up included)", False),
                              ("workers started before the clock", True)):
        runs: dict[int, list[dict[str, Any]]] = {1: [], 2: []}
        for rep in range(repeats):
            for workers in (1, 2):
                load = _machine_state()
                cpu0 = time.process_time()
                kids0 = resource.getrusage(resource.RUSAGE_CHILDREN)
                ticks0 = _cpu_ticks()
                with _pool_class(prestart=prestart) as pools:
                    started = time.perf_counter()
                    outcome = run_sweep(template, grid, fixed_values=fixed, settings=settings,
                                        workers=workers)
                    wall = time.perf_counter() - started
                # the pool's workers have exited and been reaped: their CPU is in RUSAGE_CHILDREN
                kids1 = resource.getrusage(resource.RUSAGE_CHILDREN)
                ticks1 = _cpu_ticks()
                parent_cpu = time.process_time() - cpu0
                worker_cpu = (kids1.ru_utime + kids1.ru_stime) - (kids0.ru_utime + kids0.ru_stime)
                busy = ((ticks1[1] - ticks0[1]) - (ticks1[0] - ticks0[0])) \
                    / os.sysconf("SC_CLK_TCK")
                others = max(0.0, busy - parent_cpu - worker_cpu) / wall  # wall: whole call
                startup = pools[0].startup_s if pools else 0.0
                startup_cpu = pools[0].startup_cpu_s if pools else 0.0
                close = pools[0].close_s if pools else 0.0
                if prestart:
                    wall -= startup
                transients = sum(p["steady_state"]["attempts"] for p in outcome.points
                                 if p.get("steady_state"))
                runs[workers].append({"wall_s": wall, "points_per_s": len(grid) / wall,
                                      "load_before": load, "startup_s": startup,
                                      "close_s": close, "parent_cpu_s": parent_cpu,
                                      "worker_cpu_s": worker_cpu, "others_cores": others,
                                      "startup_cpu_s": startup_cpu,
                                      "cores_used": (parent_cpu + worker_cpu) / (wall + startup),
                                      "statuses": _statuses(outcome), "transients": transients})
                _say(f"   [{variant}] rep {rep + 1} workers={workers}: {wall:6.2f} s, "
                     f"{len(grid) / wall:5.2f} points/s, before: {load}"
                     + (f", pool start-up {startup:.2f} s, {startup_cpu:.2f} s CPU (excluded)"
                        if prestart else "")
                     + f", CPU parent {parent_cpu:.2f} s + workers {worker_cpu:.2f} s = "
                     f"{(parent_cpu + worker_cpu) / (wall + startup):.2f} cores busy, other "
                     f"processes {others:.2f} cores, "
                     f"{transients} transients, {_statuses(outcome)}")
        w1 = _spread([r["wall_s"] for r in runs[1]])
        w2 = _spread([r["wall_s"] for r in runs[2]])
        speedups = [a["wall_s"] / b["wall_s"] for a, b in zip(runs[1], runs[2])]
        result["variants"][variant] = {
            "runs": runs, "wall_1": w1, "wall_2": w2,
            "rate_1": len(grid) / w1["median"], "rate_2": len(grid) / w2["median"],
            "speedup": w1["median"] / w2["median"], "speedup_per_rep": speedups,
            "speedup_best": w1["min"] / w2["min"],
            "cpu_per_point_1": statistics.median(
                (r["parent_cpu_s"] + r["worker_cpu_s"] - r["startup_cpu_s"]) / len(grid)
                for r in runs[1]),
            "cpu_per_point_2": statistics.median(
                (r["parent_cpu_s"] + r["worker_cpu_s"] - r["startup_cpu_s"]) / len(grid)
                for r in runs[2]),
            "cores_used_2": statistics.median(r["cores_used"] for r in runs[2]),
        }
        v = result["variants"][variant]
        # Other processes on the cores simloop leaves free (one, with one worker) slow it little;
        # a run is undisturbed when others used no more than those plus _CLEAN_CORES.
        spare = {w: max(0, (os.cpu_count() or 1) - w) for w in (1, 2)}
        clean = {w: [r["wall_s"] for r in runs[w]
                     if r["others_cores"] <= spare[w] + _CLEAN_CORES] for w in (1, 2)}
        v["clean_runs"] = {w: len(clean[w]) for w in (1, 2)}
        v["speedup_clean"] = (statistics.median(clean[1]) / statistics.median(clean[2])
                              if clean[1] and clean[2] else None)
        if clean[1] and clean[2]:
            v["rate_1_clean"] = len(grid) / statistics.median(clean[1])
            v["rate_2_clean"] = len(grid) / statistics.median(clean[2])
        _say(f"   [{variant}] median: 1 worker {w1['median']:.2f} s "
             f"({w1['min']:.2f}..{w1['max']:.2f}), 2 workers {w2['median']:.2f} s "
             f"({w2['min']:.2f}..{w2['max']:.2f}); speed-up {w1['median'] / w2['median']:.2f}x "
             f"(per repeat {', '.join(f'{s:.2f}' for s in speedups)}; best of each "
             f"{v['speedup_best']:.2f}x); CPU per point"
             + (" (worker start-up excluded)" if prestart else " (worker start-up included)")
             + f" {1e3 * v['cpu_per_point_1']:.0f} ms "
             f"(1 worker) / {1e3 * v['cpu_per_point_2']:.0f} ms (2 workers); cores busy with 2 "
             f"workers {v['cores_used_2']:.2f} of {os.cpu_count()}")
        if v["speedup_clean"] is not None:
            _say(f"   [{variant}] undisturbed runs only (others under {_CLEAN_CORES} cores beyond "
                 f"the ones simloop left free; {v['clean_runs'][1]} with 1 worker, "
                 f"{v['clean_runs'][2]} with 2): "
                 f"{v['rate_1_clean']:.2f} -> {v['rate_2_clean']:.2f} points/s, speed-up "
                 f"{v['speedup_clean']:.2f}x")
        else:
            _say(f"   [{variant}] no undisturbed run pair (others under {_CLEAN_CORES} cores "
                 "beyond the ones simloop left free): the machine was busy")
    return result


# ------------------------------------------------------------------------------- 2. overhead
class _Stages:
    """Wall time per stage of each point, by wrapping module attributes (outermost call only)."""

    def __init__(self) -> None:
        self.local = threading.local()
        self.points: list[dict[str, Any]] = []
        self.undo: list[Callable[[], None]] = []

    def current(self) -> dict[str, Any] | None:
        return getattr(self.local, "point", None)

    def wrap(self, owner: Any, name: str, label: str) -> None:
        original = getattr(owner, name)
        stages = self

        @functools.wraps(original)
        def timed(*args: Any, **kwargs: Any) -> Any:
            point = stages.current()
            if point is None or getattr(stages.local, "depth", 0):
                return original(*args, **kwargs)
            stages.local.depth = 1
            started = time.perf_counter()
            try:
                return original(*args, **kwargs)
            finally:
                point["stages"][label] += time.perf_counter() - started
                stages.local.depth = 0

        setattr(owner, name, timed)
        self.undo.append(lambda: setattr(owner, name, original))

    def restore(self) -> None:
        while self.undo:
            self.undo.pop()()


def _instrument(stages: _Stages) -> Callable[[Any, Any], None]:
    """Record each point's wall time; time the stages run_circuit calls.

    Returns the pool recorder that files each submitted request, its ``Trace.wall_time`` and
    its round trip (submit to result) under the point whose thread submitted it.
    """
    original_point = sweep_mod.simulate_point

    def simulate_point(*args: Any, **kwargs: Any) -> dict[str, Any]:
        point = {"requests": [], "engine_s": [], "roundtrip_s": [], "stages": defaultdict(float)}
        stages.local.point = point
        started = time.perf_counter()
        try:
            return original_point(*args, **kwargs)
        finally:
            point["wall_s"] = time.perf_counter() - started
            stages.local.point = None
            stages.points.append(point)

    def recorder(request: Any, future: Any) -> None:
        point = stages.current()
        if point is None:
            return
        submitted = time.perf_counter()
        point["requests"].append(request)

        def done(f: Any) -> None:
            if not f.cancelled() and f.exception() is None:
                point["engine_s"].append(f.result().wall_time)
                point["roundtrip_s"].append(time.perf_counter() - submitted)

        future.add_done_callback(done)

    sweep_mod.simulate_point = simulate_point
    stages.undo.append(lambda: setattr(sweep_mod, "simulate_point", original_point))
    for owner, name, label in (
        (CircuitTemplate, "render", "render netlist"),
        (steady_mod, "judge", "settle judgement (steady.judge)"),
        (analyse_mod, "judge", "settle judgement (steady.judge)"),
        (analyse_mod, "spectrum_from_samples", "Fourier (spectrum_from_samples)"),
        (analyse_mod, "waveform_metrics", "waveform metrics"),
        (ideal_mod, "ideal_spectrum", "ideal spectrum"),
        (analyse_mod, "ideal_parameters", "ideal parameters"),
        (analyse_mod, "drop_corrected_estimate", "estimate (drop_corrected_estimate)"),
        (analyse_mod, "compare_spectra", "compare spectra"),
        (analyse_mod, "conduction_angle_deg", "conduction angle"),
        (analyse_mod, "_source_power", "source power"),
        (analyse_mod, "conversion_efficiency", "efficiency"),
        (analyse_mod, "_page_check", "Page bound check"),
        (analyse_mod, "thd", "THD"),
        (analyse_mod, "thd_rms", "THD"),
        (RunResult, "to_dict", "result to_dict"),
    ):
        if hasattr(owner, name):  # the code evolves: time what is there
            stages.wrap(owner, name, label)
    return recorder


def _overhead_sweep(template: CircuitTemplate, grid: list[dict[str, Any]], fixed: dict[str, float],
                    settings: RunSettings) -> tuple[list[dict[str, Any]], float, Any, float]:
    """One instrumented workers=1 sweep: per-point records, run_sweep wall (start-up excluded)."""
    stages = _Stages()
    recorder = _instrument(stages)
    try:
        with _pool_class(prestart=True, recorder=recorder) as pools:
            started = time.perf_counter()
            outcome = run_sweep(template, grid, fixed_values=fixed, settings=settings, workers=1)
            wall = time.perf_counter() - started - pools[0].startup_s
    finally:
        stages.restore()
    return stages.points, wall, outcome, pools[0].close_s


def _replay(requests: list[list[Any]]) -> tuple[list[float], list[float]]:
    """Each point's requests through a fresh one-worker pool: (sum of wall_time, of round trips)."""
    engine, trips = [], []
    with _ORIGINAL_POOL(1) as pool:
        _start_workers(pool, 1)
        for point in requests:
            e = r = 0.0
            for request in point:
                t0 = time.perf_counter()
                trace = pool.run(request)
                r += time.perf_counter() - t0
                e += trace.wall_time
            engine.append(e)
            trips.append(r)
    return engine, trips


def measure_overhead(points: int, *, repeats: int, profile: bool) -> dict[str, Any]:
    template, grid, fixed = throughput_grid(points)
    settings = RunSettings(harmonics=10)
    _say(f"\n== 2. overhead per point: {template.name}, {len(grid)} points, workers=1, pool "
         f"started before the clock; {repeats} instrumented sweeps and {repeats} replays, "
         "per point the fastest of each (the machine is shared: the minimum is the least "
         "disturbed figure)")
    t0 = time.perf_counter()
    run_sweep(template, grid[:1], fixed_values=fixed, settings=settings, workers=1)
    warm = time.perf_counter() - t0
    _say(f"   warm-up point: {warm:.2f} s (in a fresh process this includes the one-off lazy "
         "imports of the analysis code; worker start-up too)")
    sweeps = []
    for rep in range(repeats):
        load = _machine_state()
        recorded, wall, outcome, close = _overhead_sweep(template, grid, fixed, settings)
        sweeps.append({"points": recorded, "wall_s": wall, "load_before": load,
                       "statuses": _statuses(outcome), "close_s": close})
        _say(f"   sweep {rep + 1}: {wall:.3f} s, before: {load}, {_statuses(outcome)}")
    for sweep in sweeps[1:]:  # the same requests every time (same grid, same settling path)
        same = all(a["requests"] == b["requests"]
                   for a, b in zip(sweeps[0]["points"], sweep["points"]))
        if not same:
            _say("   note: the sweeps did not send identical requests")
    requests = [p["requests"] for p in sweeps[0]["points"]]
    replays = []
    for rep in range(repeats):
        load = _machine_state()
        engine, trips = _replay(requests)
        replays.append({"engine_s": engine, "roundtrip_s": trips, "load_before": load})
        _say(f"   replay {rep + 1}: engine {sum(engine):.3f} s, before: {load}")
    rows = []
    for index, swept in enumerate(grid):
        wall = min(s["points"][index]["wall_s"] for s in sweeps)
        engine = min(r["engine_s"][index] for r in replays)
        in_run = [sum(s["points"][index]["engine_s"]) for s in sweeps]
        in_run_wall = [s["points"][index]["wall_s"] - e for s, e in zip(sweeps, in_run)]
        rows.append({
            "rload": swept["rload"], "vpk": swept["vpk"],
            "transients": len(requests[index]), "wall_s": wall, "engine_s": engine,
            "diff_s": wall - engine, "overhead": (wall - engine) / engine,
            "engine_in_sweep_s": min(in_run),
            "overhead_same_run": min(d / e for d, e in zip(in_run_wall, in_run)),
        })
    _say("   point  rload[ohm] vpk[V]  transients  simloop[s]  engine[s]  diff[s]  overhead  "
         "(vs same-run engine)")
    for index, row in enumerate(rows):
        _say(f"   {index:5d}  {row['rload']:10.1f} {row['vpk']:6.1f}  {row['transients']:10d}  "
             f"{row['wall_s']:10.4f}  {row['engine_s']:9.4f}  {row['diff_s']:7.4f}  "
             f"{100 * row['overhead']:6.1f} %  ({100 * row['overhead_same_run']:5.1f} %)")
    total_wall = sum(r["wall_s"] for r in rows)
    total_engine = sum(r["engine_s"] for r in rows)
    overheads = [r["overhead"] for r in rows]
    same_run = [r["overhead_same_run"] for r in rows]
    best = min(sweeps, key=lambda s: s["wall_s"])
    summary = {
        "sum_point_wall_s": total_wall,
        "sum_engine_s": total_engine,
        "aggregate_overhead": (total_wall - total_engine) / total_engine,
        "median_overhead": statistics.median(overheads),
        "max_overhead": max(overheads),
        "min_overhead": min(overheads),
        "median_overhead_same_run": statistics.median(same_run),
        "max_overhead_same_run": max(same_run),
        "points_within_target": sum(1 for o in overheads if o <= TARGET_OVERHEAD),
        "sweep_wall_s": [s["wall_s"] for s in sweeps],
        "sweep_outside_points_s": best["wall_s"] - sum(p["wall_s"] for p in best["points"]),
        "pool_close_s": best["close_s"],
        "replay_engine_s": [sum(r["engine_s"]) for r in replays],
        "statuses": sweeps[0]["statuses"],
    }
    _say(f"   totals (per-point minima): simloop {total_wall:.3f} s, engine {total_engine:.3f} s, "
         f"difference {total_wall - total_engine:.3f} s; overhead aggregate "
         f"{100 * summary['aggregate_overhead']:.1f} %, per point median "
         f"{100 * summary['median_overhead']:.1f} % (min {100 * summary['min_overhead']:.1f} %, "
         f"max {100 * summary['max_overhead']:.1f} %); {summary['points_within_target']} of "
         f"{len(rows)} points within {100 * TARGET_OVERHEAD:.0f} %; against the engine time of "
         f"the same run: median {100 * summary['median_overhead_same_run']:.1f} %, "
         f"max {100 * summary['max_overhead_same_run']:.1f} %")
    _say(f"   run_sweep wall (fastest sweep) {best['wall_s']:.3f} s, of which outside the points "
         f"{summary['sweep_outside_points_s']:.3f} s, of it closing the pool (waiting for the "
         f"workers to exit) {best['close_s']:.3f} s")
    # breakdown of the fastest sweep: wall - its own engine time, exactly decomposed
    breakdown: dict[str, float] = defaultdict(float)
    b_wall = sum(p["wall_s"] for p in best["points"])
    b_engine = sum(sum(p["engine_s"]) for p in best["points"])
    for point in best["points"]:
        breakdown["pool round trip beyond Trace.wall_time (queue, pickling, IPC, worker "
                  "clean-up)"] += sum(point["roundtrip_s"]) - sum(point["engine_s"])
        for label, value in point["stages"].items():
            breakdown[label] += value
    breakdown["other (settle loop, probes, requests, RunResult, dict building)"] = (
        b_wall - b_engine - sum(breakdown.values()))
    _say(f"   where the time beyond the engine goes (fastest sweep: points {b_wall:.3f} s, "
         f"engine {b_engine:.3f} s):")
    for label, value in sorted(breakdown.items(), key=lambda kv: -abs(kv[1])):
        _say(f"     {1e3 * value / len(rows):7.2f} ms/point  {100 * value / b_engine:6.2f} % of "
             f"engine  {label}")
    trips = min(sum(r["roundtrip_s"]) - sum(r["engine_s"]) for r in replays)
    count = sum(len(p) for p in requests)
    _say(f"   replay alone: pool.run round trip beyond Trace.wall_time {1e3 * trips / count:.1f} ms "
         "per transient")
    summary["warm_up_point_s"] = warm
    result = {"rows": rows, "summary": summary, "breakdown": dict(breakdown),
              "breakdown_points": len(rows), "breakdown_engine_s": b_engine}
    if profile:
        result["profile"] = profile_points(template, grid, fixed, settings)
    return result


def profile_points(template: CircuitTemplate, grid: list[dict[str, Any]], fixed: dict[str, float],
                   settings: RunSettings) -> str:
    """cProfile of run_circuit over the grid in this thread (cProfile sees one thread only)."""
    with _ORIGINAL_POOL(1) as pool:
        _start_workers(pool, 1)
        profiler = cProfile.Profile()
        profiler.enable()
        for swept in grid:
            run_circuit(template, values={**fixed, **swept}, settings=settings, pool=pool)
        profiler.disable()
    buffer = io.StringIO()
    stats = pstats.Stats(profiler, stream=buffer)
    stats.sort_stats("tottime").print_stats(18)
    text = buffer.getvalue()
    lines = [ln for ln in text.splitlines() if ln.strip()]
    start = next((i for i, ln in enumerate(lines) if ln.lstrip().startswith("ncalls")), 0)
    table = "\n".join(lines[max(0, start - 3):])
    _say("   cProfile of run_circuit over the same points (main thread, sorted by own time; "
         "'acquire' of a lock is the wait for the engine):")
    for line in table.splitlines():
        _say("     " + line)
    buffer = io.StringIO()
    stats = pstats.Stats(profiler, stream=buffer)
    stats.sort_stats("cumulative").print_stats(r"simloop[/\\]", 22)
    lines = [ln for ln in buffer.getvalue().splitlines() if ln.strip()]
    start = next((i for i, ln in enumerate(lines) if ln.lstrip().startswith("ncalls")), 0)
    cumulative = "\n".join(lines[start:])
    _say(f"   the same, simloop functions by cumulative time ({len(grid)} points; includes the "
         "engine wait where a function waits for it):")
    for line in cumulative.splitlines():
        _say("     " + line)
    return table + "\n\n" + cumulative


# ------------------------------------------------------------------------------- 3. memory
def measure_memory(points: int, *, max_tasks: Any = _KEEP, every: int = 50) -> dict[str, Any]:
    template, grid, fixed = memory_grid(points)
    settings = RunSettings(harmonics=10)
    default = _default_max_tasks()
    tasks = default if max_tasks is _KEEP else max_tasks
    what = _recycling(tasks) + (" (the engine's default)" if max_tasks is _KEEP else "")
    _say(f"\n== 3. memory: {template.name}, {len(grid)} points (duty x rload), workers=1, store in "
         f"a temp folder, {what}; VmRSS every {every} points")
    samples: list[dict[str, Any]] = []
    lives: dict[int, list[float]] = {}  # RSS readings of each worker after its first sighting
    window: list[float] = []
    count = 0
    pools: list[Any] = []
    intervals: list[float] = []  # wall time of each point (between on_point calls)
    after_respawn: list[int] = []  # indexes of points run by a worker seen for the first time
    fresh = [False]
    started = last = time.perf_counter()

    def on_point(doc: dict[str, Any]) -> None:
        # Workers are read after every point: with recycling every 50 transients a reading
        # every 50 points would always meet a freshly spawned, not yet initialised worker.
        # A worker's first sighting is skipped for the same reason.
        nonlocal count, last
        now = time.perf_counter()
        intervals.append(now - last)
        last = now
        if fresh[0]:
            after_respawn.append(count)
            fresh[0] = False
        count += 1
        for pid in _worker_pids(pools[0]) if pools else []:
            rss = _rss_mb(pid)
            if rss is None:
                continue
            if pid not in lives:
                lives[pid] = []
                fresh[0] = count > 1  # the next point waits for this worker's start-up
            else:
                lives[pid].append(rss)
                window.append(rss)
        if count == 1 or count % every == 0 or count == len(grid):
            samples.append({"points": count, "parent_mb": _rss_mb(os.getpid()),
                            "worker_mb": max(window) if window else None,
                            "elapsed_s": time.perf_counter() - started})
            window.clear()

    with tempfile.TemporaryDirectory(prefix="simloop-bench-") as folder:
        store = ResultStore(Path(folder) / "bench.sqlite")
        put = store.put
        store_s = [0.0]

        def timed_put(*args: Any, **kwargs: Any) -> None:
            t0 = time.perf_counter()
            try:
                put(*args, **kwargs)
            finally:
                store_s[0] += time.perf_counter() - t0

        store.put = timed_put  # run_sweep calls store.put: time the commits
        try:
            with _pool_class(prestart=False, max_tasks=max_tasks) as created:
                pools = created
                before = _rss_mb(os.getpid())
                outcome = run_sweep(template, grid, fixed_values=fixed, settings=settings,
                                    store=store, fresh=True, workers=1, on_point=on_point)
        finally:
            store.close()
    wall = time.perf_counter() - started
    _say("   points  parent[MB]  worker[MB]  elapsed[s]   (worker: largest RSS of an initialised "
         "worker since the previous line)")
    for s in samples:
        worker = f"{s['worker_mb']:10.1f}" if s["worker_mb"] is not None else "         -"
        _say(f"   {s['points']:6d}  {s['parent_mb']:10.1f}  {worker}  {s['elapsed_s']:10.1f}")
    parent = [s["parent_mb"] for s in samples]
    workers = [s["worker_mb"] for s in samples[1:] if s["worker_mb"] is not None]
    growth = max((max(r) - min(r) for r in lives.values() if r), default=None)
    typical = statistics.median(intervals[1:]) if len(intervals) > 1 else None
    respawn = (statistics.median([intervals[i] for i in after_respawn]) - typical
               if after_respawn and typical is not None else None)
    result = {
        "points": len(grid), "max_tasks_per_child": tasks, "recycling": _recycling(tasks),
        "default_pool": max_tasks is _KEEP, "samples": samples, "parent_before_mb": before,
        "parent_range_mb": max(parent) - min(parent),
        "worker_range_mb": (max(workers) - min(workers)) if workers else None,
        "worker_max_mb": max(workers) if workers else None,
        "worker_pids_seen": len(lives), "worker_growth_in_life_mb": growth, "wall_s": wall,
        "points_per_s": len(grid) / wall,
        "statuses": _statuses(outcome), "store_put_s": store_s[0],
        "median_point_s": typical, "respawn_cost_s": respawn, "respawns": len(after_respawn),
    }
    _say(f"   parent max - min {result['parent_range_mb']:.1f} MB (before the sweep "
         f"{before:.1f} MB); worker max - min "
         + (f"{result['worker_range_mb']:.1f} MB (max {result['worker_max_mb']:.1f} MB)"
            if workers else "n/a")
         + (f", largest growth within one worker's life {growth:.1f} MB"
            if growth is not None else "")
         + f"; {len(lives)} worker processes seen; {wall:.1f} s, {len(grid) / wall:.2f} points/s; "
         f"{_statuses(outcome)}; store commits {1e3 * store_s[0] / len(grid):.1f} ms/point")
    if typical is not None:
        _say(f"   median point {1e3 * typical:.1f} ms"
             + (f"; a point after a worker respawn takes {1e3 * respawn:.0f} ms longer "
                f"({len(after_respawn)} respawns: {respawn * len(after_respawn):.1f} s of the sweep, "
                f"{100 * respawn * len(after_respawn) / wall:.0f} %)" if respawn is not None else ""))
    return result


# ------------------------------------------------------------------------------- unlimited BLAS
def throughput_unlimited(points: int, repeats: int) -> dict[str, Any] | None:
    """The throughput measurement again in a child process without the BLAS thread limit."""
    env = {k: v for k, v in os.environ.items() if k not in _BLAS_VARS}
    with tempfile.TemporaryDirectory(prefix="simloop-bench-") as folder:
        out = Path(folder) / "unlimited.json"
        command = [sys.executable, str(Path(__file__).resolve()), "--no-blas-limit", "--only",
                   "throughput", "--points", str(points), "--repeats", str(repeats),
                   "--json", str(out), "--no-unlimited", "--quiet-wait", str(_QUIET_WAIT[0])]
        _say("\n== 1b. throughput again without the BLAS thread limit (child process): "
             + " ".join(command[1:]))
        done = subprocess.run(command, env=env, capture_output=True, text=True, check=False)
        for line in done.stdout.splitlines():
            if line.startswith("   ["):
                _say("   " + line.strip())
        if done.returncode != 0 or not out.is_file():
            _say(f"   child failed (exit {done.returncode}): {done.stderr.strip()[-500:]}")
            return None
        return json.loads(out.read_text())["throughput"]


# ------------------------------------------------------------------------------- main
def _verdict(ok: bool | None) -> str:
    return "n/a" if ok is None else ("PASS" if ok else "MISS")


def summary(figures: dict[str, Any]) -> None:
    _say("\n== summary (targets of issue 4; printed, not asserted)")
    rows = []
    thr = figures.get("throughput")
    if thr:
        for name, variant in thr["variants"].items():
            rows.append((f"speed-up 2 vs 1 worker, {thr['points']} points [{name}]",
                         f">= {TARGET_SPEEDUP}x",
                         f"{variant['speedup']:.2f}x ({variant['rate_1']:.2f} -> "
                         f"{variant['rate_2']:.2f} points/s; best-of {variant['speedup_best']:.2f}x)",
                         _verdict(variant["speedup"] >= TARGET_SPEEDUP)))
            if variant.get("speedup_clean") is not None:
                rows.append(("  same, undisturbed runs only", f">= {TARGET_SPEEDUP}x",
                             f"{variant['speedup_clean']:.2f}x ({variant['rate_1_clean']:.2f} -> "
                             f"{variant['rate_2_clean']:.2f} points/s)",
                             _verdict(variant["speedup_clean"] >= TARGET_SPEEDUP)))
    unl = figures.get("throughput_unlimited")
    if unl:
        for name, variant in unl["variants"].items():
            rows.append((f"  same, BLAS threads not limited [{name}]", f">= {TARGET_SPEEDUP}x",
                         f"{variant['speedup']:.2f}x ({variant['rate_1']:.2f} -> "
                         f"{variant['rate_2']:.2f} points/s; best-of {variant['speedup_best']:.2f}x)",
                         _verdict(variant["speedup"] >= TARGET_SPEEDUP)))
    ovh = figures.get("overhead")
    if ovh:
        s = ovh["summary"]
        target = f"<= {TARGET_OVERHEAD:.0%}"
        rows.append(("simloop overhead per point over bare engine, median", target,
                     f"{100 * s['median_overhead']:.1f} % (aggregate "
                     f"{100 * s['aggregate_overhead']:.1f} %, max {100 * s['max_overhead']:.1f} %)",
                     _verdict(s["median_overhead"] <= TARGET_OVERHEAD)))
        rows.append(("  same, against the engine time of the same sweep, median", target,
                     f"{100 * s['median_overhead_same_run']:.1f} % (max "
                     f"{100 * s['max_overhead_same_run']:.1f} %)",
                     _verdict(s["median_overhead_same_run"] <= TARGET_OVERHEAD)))
    for key in ("memory", "memory_compare"):
        mem = figures.get(key)
        if mem:
            tag = f", {mem['recycling']}"
            rows.append((f"parent RSS max - min over {mem['points']} points{tag}",
                         f"<= {TARGET_MEMORY_MB:.0f} MB", f"{mem['parent_range_mb']:.1f} MB",
                         _verdict(mem["parent_range_mb"] <= TARGET_MEMORY_MB)))
            if mem["worker_range_mb"] is not None:
                rows.append((f"worker RSS max - min over {mem['points']} points{tag}",
                             f"<= {TARGET_MEMORY_MB:.0f} MB", f"{mem['worker_range_mb']:.1f} MB",
                             _verdict(mem["worker_range_mb"] <= TARGET_MEMORY_MB)))
    width = max(len(r[0]) for r in rows) if rows else 10
    _say(f"   {'measure':<{width}}  {'target':<9}  {'measured':<44}  verdict")
    for name, target, measured, verdict in rows:
        _say(f"   {name:<{width}}  {target:<9}  {measured:<44}  {verdict}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points-memory", type=int, default=None,
                        help="points of the memory run (default 1000; 100 with --quick)")
    parser.add_argument("--points", type=int, default=24, help="points of the throughput grid")
    parser.add_argument("--repeats", type=int, default=5,
                        help="repeats of each throughput run and of the overhead sweep")
    parser.add_argument("--quick", action="store_true",
                        help="smoke run: 8 points, 1 repeat, 100 memory points")
    parser.add_argument("--only", default="throughput,overhead,memory",
                        help="comma list of throughput, overhead, memory")
    parser.add_argument("--no-blas-limit", action="store_true",
                        help="do not set OPENBLAS/OMP/MKL_NUM_THREADS=1")
    parser.add_argument("--no-unlimited", action="store_true",
                        help="skip the throughput run without the BLAS limit")
    parser.add_argument("--no-profile", action="store_true", help="skip the cProfile table")
    parser.add_argument("--memory-compare", action="store_true",
                        help="run the memory sweep again with the other worker-recycling choice")
    parser.add_argument("--quiet-wait", type=float, default=0.0, metavar="S",
                        help="before each timed run wait up to S seconds for 90 %% of the CPUs "
                             "to be idle (for shared machines)")
    parser.add_argument("--json", type=Path, help="also write every figure to this JSON file")
    args = parser.parse_args(argv)
    import signal

    # SIGTERM (and SIGINT, which a background shell ignores) leave through the context
    # managers, so the engine pools are closed and no worker is left behind.
    signal.signal(signal.SIGTERM, lambda *_: sys.exit(143))
    if args.quick:
        args.points, args.repeats = 8, 1
    if args.points_memory is None:
        args.points_memory = 100 if args.quick else 1000
    only = {part.strip() for part in args.only.split(",") if part.strip()}
    _QUIET_WAIT[0] = max(0.0, args.quiet_wait)

    figures: dict[str, Any] = {}
    _say("simloop sweep benchmark")
    _say(f"   date {time.strftime('%Y-%m-%d %H:%M')}, {platform.machine()}, os.cpu_count() = "
         f"{os.cpu_count()}, CPU {_cpu_model()}")
    blas = {name: os.environ.get(name) for name in _BLAS_VARS}
    limits = ", ".join(f"{k}={v}" for k, v in blas.items())
    _say(f"   BLAS threads limited: {not args.no_blas_limit} ({limits})")
    versions = _versions()
    _say("   versions: " + ", ".join(f"{k} {v}" for k, v in versions.items()))
    _say(f"   load average before: {_load()}")
    figures["machine"] = {"cpu_count": os.cpu_count(), "machine": platform.machine(),
                          "cpu": _cpu_model(), "blas_env": blas, "versions": versions}
    if "throughput" in only:
        figures["throughput"] = measure_throughput(args.points, args.repeats)
        if not args.no_unlimited and not args.quick and not args.no_blas_limit:
            figures["throughput_unlimited"] = throughput_unlimited(args.points, args.repeats)
    if "overhead" in only:
        figures["overhead"] = measure_overhead(args.points, repeats=args.repeats,
                                               profile=not args.no_profile)
    if "memory" in only:
        figures["memory"] = measure_memory(args.points_memory)
        if args.memory_compare:
            other = 50 if _default_max_tasks() is None else None
            figures["memory_compare"] = measure_memory(args.points_memory, max_tasks=other)
            a, b = figures["memory"], figures["memory_compare"]
            _say(f"   the sweep took {a['wall_s']:.1f} s ({a['recycling']}) and {b['wall_s']:.1f} s "
                 f"({b['recycling']}); same points, and the machine may be shared: compare "
                 "with care")
    summary(figures)
    if args.json:
        def plain(value: Any) -> Any:
            if isinstance(value, (np.floating, np.integer)):
                return value.item()
            if isinstance(value, engine_mod.TransientRequest):
                return None
            return str(value)

        args.json.write_text(json.dumps(figures, indent=1, default=plain))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
