"""Sweeps: a grid of parameter values run point by point, in parallel, stored as they finish.

Each point is one :func:`simloop.analyse.run_circuit`. Points run on a local pool of engine
workers (default) or on an existing Dask distributed cluster; a point that fails (engine error,
crash, hang, no convergence) is recorded with its reason and the sweep goes on. Every finished
point is committed to the results store at once; a rerun reuses the stored points whose key
matches and simulates only the rest.
"""

from __future__ import annotations

import hashlib
import itertools
import json
import math
import threading
from collections.abc import Callable, Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor, as_completed
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from .errors import InputError, SimloopError
from .netlist import CircuitTemplate
from .units import parse_number

#: Largest grid run without --max-points.
DEFAULT_MAX_POINTS = 1000
#: Most values one --vary may list or generate (the grid limit applies on top).
MAX_AXIS_VALUES = 100_000
#: Most local engine workers one sweep may start.
MAX_WORKERS = 256


@dataclass(frozen=True, slots=True)
class Vary:
    """One swept name and its values (numbers for parameters, model names for choices)."""

    name: str
    values: tuple[float | str, ...]
    is_choice: bool = False


def parse_vary(text: str, template: CircuitTemplate) -> Vary:
    """Parse ``NAME=SPEC``: a list ``100,1k,10k`` or a range ``start:stop:count[:log]``.

    Parameters
    ----------
    text : str
        The ``--vary`` argument.
    template : CircuitTemplate
        The circuit: NAME must be one of its parameters (values checked against their range)
        or model choices (values: allowed model names, as a list).

    Raises
    ------
    InputError
        One line naming the problem: unknown name, malformed list or range, count < 1, a log
        range through zero, values out of range, repeated values.

    Examples
    --------
    >>> from simloop.netlist import load_circuit
    >>> t = load_circuit("half-wave")
    >>> parse_vary("rload=10:1k:3:log", t).values
    (10.0, 100.0, 1000.0)
    """
    name, sep, spec = str(text).partition("=")
    name = name.strip().lower()
    spec = spec.strip()
    if not sep or not name or not spec:
        raise InputError(f"--vary {text!r}: write NAME=LIST or NAME=START:STOP:COUNT[:log], "
                         "e.g. rload=100,1k,10k or vpk=1:20:5")
    what = f"--vary {name}"
    if name in template.choices:
        choice = template.choices[name]
        models = tuple(v.strip().lower() for v in spec.split(","))
        for model in models:
            if model not in choice.allowed:
                raise InputError(f"{what}: {model!r} is not an allowed model; choose from "
                                 f"{', '.join(choice.allowed)}")
        _no_repeats(models, what)
        return Vary(name, models, is_choice=True)
    if name not in template.parameters:
        known = ", ".join([*template.parameters, *template.choices])
        raise InputError(f"{what}: {template.name} has no parameter or choice {name!r}; known: {known}")
    if ":" in spec:
        parts = spec.split(":")
        if len(parts) not in (3, 4) or (len(parts) == 4 and parts[3].strip().lower() != "log"):
            raise InputError(f"{what}: a range is START:STOP:COUNT or START:STOP:COUNT:log, got {spec!r}")
        start = parse_number(parts[0], what=f"{what} start")
        stop = parse_number(parts[1], what=f"{what} stop")
        try:
            count = int(parts[2])
        except ValueError:
            raise InputError(f"{what}: COUNT must be a whole number, got {parts[2]!r}") from None
        if count < 1:
            raise InputError(f"{what}: COUNT must be at least 1, got {count}")
        if count > MAX_AXIS_VALUES:
            raise InputError(f"{what}: COUNT {count} is over the limit of {MAX_AXIS_VALUES} "
                             "values per axis; thin the range")
        if count == 1 and start != stop:
            raise InputError(f"{what}: a range with COUNT 1 must have START = STOP")
        if len(parts) == 4:
            if start <= 0 or stop <= 0:
                raise InputError(f"{what}: a log range needs START and STOP > 0")
            values = tuple(float(v) for v in np.geomspace(start, stop, count))
        else:
            values = tuple(float(v) for v in np.linspace(start, stop, count))
    else:
        items = spec.split(",")
        if len(items) > MAX_AXIS_VALUES:
            raise InputError(f"{what}: {len(items)} values, over the limit of {MAX_AXIS_VALUES}")
        values = tuple(parse_number(v, what=what) for v in items)
    spec_obj = template.parameters[name]
    checked = tuple(spec_obj.check(v, what=what) for v in values)
    _no_repeats(checked, what)
    return Vary(name, checked)


def _no_repeats(values: Sequence[Any], what: str) -> None:
    if len(set(values)) != len(values):
        raise InputError(f"{what}: a value is listed twice; give each value once")


def expand_grid(varies: Sequence[Vary], *, max_points: int = DEFAULT_MAX_POINTS) -> list[dict[str, float | str]]:
    """All combinations, the first ``--vary`` outermost. Refuses grids over ``max_points``."""
    names = [v.name for v in varies]
    if len(set(names)) != len(names):
        raise InputError("the same name is given to --vary twice; vary each name once")
    size = math.prod(len(v.values) for v in varies)
    if size > max_points:
        raise InputError(f"the grid has {size} points, over the limit of {max_points}; "
                         "thin it or raise --max-points")
    return [dict(zip(names, combo)) for combo in itertools.product(*(v.values for v in varies))]


def circuit_hash(template: CircuitTemplate) -> str:
    """SHA-256 of what defines the circuit: the netlist with includes inlined, and its metadata."""
    digest = hashlib.sha256(template.inlined_text.encode())
    sidecar = template.path.with_suffix(".toml")
    if sidecar.is_file():
        digest.update(b"\0metadata\0" + sidecar.read_bytes())
    return digest.hexdigest()


def settings_identity(settings) -> dict[str, Any]:
    """The run settings that change results (the timeout does not), as plain JSON data."""
    data = asdict(settings)
    data["steady"].pop("timeout", None)
    return data


def point_key(*, circuit_hash: str, parameters: Mapping[str, float], choices: Mapping[str, str],
              settings: Mapping[str, Any], engine_version: str) -> str:
    """The store key of one point: SHA-256 of its canonical JSON identity."""
    identity = {
        "circuit_hash": circuit_hash,
        "parameters": {k: float(v) for k, v in sorted(parameters.items())},
        "choices": dict(sorted(choices.items())),
        "settings": settings,
        "engine": engine_version,
    }
    return hashlib.sha256(json.dumps(identity, sort_keys=True).encode()).hexdigest()


@dataclass(slots=True)
class SweepOutcome:
    """What a sweep produced: the points in grid order, and how many were computed or reused."""

    points: list[dict[str, Any]] = field(default_factory=list)
    simulated: int = 0
    reused: int = 0

    @property
    def failed(self) -> int:
        return sum(1 for p in self.points if p["status"] != "ok")

    def to_dict(self) -> dict[str, Any]:
        return {"points": self.points, "simulated": self.simulated, "reused": self.reused,
                "failed": self.failed}


def simulate_point(template: CircuitTemplate, values: Mapping[str, float],
                   choices: Mapping[str, str], settings, pool: Any = None) -> dict[str, Any]:
    """Run one point; never raises for a simulation problem: the point records it.

    This is the unit of work on every executor (a thread of the local pool, or a Dask task:
    it must stay a picklable module-level function).
    """
    from .analyse import run_circuit

    try:
        result = run_circuit(template, values=values, choices=choices, settings=settings,
                             pool=pool if pool is not None else _dask_worker_pool())
    except SimloopError as exc:
        return {"status": "failed", "error": str(exc), "steady_state": None, "metrics": None,
                "harmonics": None, "engine_version": None}
    except Exception as exc:  # noqa: BLE001 - one bad point must not end the sweep
        return {"status": "failed", "error": f"internal error {type(exc).__name__}: {exc}",
                "steady_state": None, "metrics": None, "harmonics": None, "engine_version": None}
    doc = result.to_dict()
    doc["status"] = "ok" if result.converged else "unconverged"
    doc["error"] = None if result.converged else (
        f"no periodic steady state within {result.steady.periods_simulated} periods "
        f"(change still to come {result.steady.drift:.1e}); raise --max-periods")
    doc["engine_version"] = result.engine_version
    return doc


_WORKER_POOL_FINALIZER = None


def _dask_worker_pool():
    """Engine pool of a Dask worker process (one engine worker, kept for the process's life).

    Dask worker processes are daemonic by default and may not start child processes; the
    engine needs one. Start workers with DASK_DISTRIBUTED__WORKER__DAEMON=False (the project's
    container image sets it).
    """
    import multiprocessing

    if multiprocessing.current_process().daemon:
        raise InputError("this Dask worker is a daemonic process and cannot start engine "
                         "workers; start the workers with DASK_DISTRIBUTED__WORKER__DAEMON=False")
    from multiprocessing.util import Finalize

    from .engine import shared_pool

    global _WORKER_POOL_FINALIZER
    pool = shared_pool()
    if _WORKER_POOL_FINALIZER is None:
        # multiprocessing joins child processes before atexit handlers run, so without this a
        # Dask worker waits on its engine worker at shutdown until its nanny kills it
        _WORKER_POOL_FINALIZER = Finalize(None, pool.close, exitpriority=10)
    return pool


def run_sweep(
    template: CircuitTemplate,
    grid: Sequence[Mapping[str, float | str]],
    *,
    fixed_values: Mapping[str, float] | None = None,
    fixed_choices: Mapping[str, str] | None = None,
    settings,
    store=None,
    fresh: bool = False,
    workers: int = 1,
    dask_address: str | None = None,
    on_point: Callable[[dict[str, Any]], None] | None = None,
) -> SweepOutcome:
    """Run every grid point (reusing stored ones), storing each as it finishes.

    Parameters
    ----------
    template : CircuitTemplate
    grid : sequence of mappings
        The swept values of each point (parameters as numbers, choices as model names).
    fixed_values, fixed_choices : mapping
        ``--set`` values applied to every point (the swept ones take precedence).
    settings : simloop.analyse.RunSettings
    store : simloop.store.ResultStore or None
    fresh : bool
        Ignore stored points (they are still overwritten with the new results).
    workers : int
        Engine workers of the local pool.
    dask_address : str or None
        ``tcp://host:port`` of a Dask scheduler: run the points there instead.
    on_point : callable
        Called with each finished point (for progress display).

    Returns
    -------
    SweepOutcome
    """
    from .engine import EnginePool, engine_version

    fixed_values = dict(fixed_values or {})
    fixed_choices = dict(fixed_choices or {})
    c_hash = circuit_hash(template)
    s_identity = settings_identity(settings)
    planned = []
    for index, swept in enumerate(grid):
        values = {**fixed_values, **{k: v for k, v in swept.items() if not isinstance(v, str)}}
        choices = {**fixed_choices, **{k: v for k, v in swept.items() if isinstance(v, str)}}
        rendered = template.render(values, choices)  # validates before anything runs
        planned.append((index, dict(swept), values, choices, dict(rendered.parameters),
                        dict(rendered.choices)))
    outcome = SweepOutcome(points=[{}] * len(planned))
    lock = threading.Lock()

    def finish(index: int, swept, doc: dict[str, Any], key: str | None, reused: bool) -> None:
        doc = dict(doc)
        doc["index"] = index
        doc["varied"] = swept
        doc["reused"] = reused
        doc.setdefault("parameters", planned[index][4])
        doc.setdefault("choices", planned[index][5])
        with lock:
            if store is not None and not reused and key is not None:
                store.put(key, circuit=template.name, circuit_hash=c_hash, settings=s_identity,
                          engine_version=doc.get("engine_version") or version,
                          document=doc)
            outcome.points[index] = doc
            if reused:
                outcome.reused += 1
            else:
                outcome.simulated += 1
        if on_point is not None:
            on_point(doc)

    client = pool = None
    try:
        if dask_address:
            client = _dask_client(dask_address)
            version = client.submit(_remote_engine_version, pure=False).result()
        else:
            pool = EnginePool(max(1, workers))
            version = engine_version(pool=pool)

        todo = []
        for index, swept, values, choices, final, final_choices in planned:
            key = point_key(circuit_hash=c_hash, parameters=final, choices=final_choices,
                            settings=s_identity, engine_version=version)
            stored = None if (store is None or fresh) else store.get(key)
            if stored is not None and stored.get("status") in ("ok", "unconverged"):
                finish(index, swept, stored, key, reused=True)
            else:
                todo.append((index, swept, values, choices, key))

        if client is not None:
            from distributed import as_completed as dask_completed

            futures = {client.submit(simulate_point, template, values, choices, settings,
                                     pure=False): (index, swept, key)
                       for index, swept, values, choices, key in todo}
            for future in dask_completed(futures):
                index, swept, key = futures[future]
                try:
                    doc = future.result()
                except Exception as exc:  # noqa: BLE001 - a lost Dask worker fails the point
                    doc = {"status": "failed", "error": f"Dask task failed: {type(exc).__name__}: {exc}"}
                finish(index, swept, doc, key, reused=False)
        else:
            with ThreadPoolExecutor(max_workers=max(1, workers)) as threads:
                futures = {threads.submit(simulate_point, template, values, choices, settings,
                                          pool): (index, swept, key)
                           for index, swept, values, choices, key in todo}
                for future in as_completed(futures):
                    index, swept, key = futures[future]
                    finish(index, swept, future.result(), key, reused=False)
    finally:
        if client is not None:
            client.close()
        if pool is not None:
            pool.close()
    return outcome


def _remote_engine_version() -> str:
    from .engine import engine_version

    _dask_worker_pool()
    return engine_version()


def _dask_client(address: str):
    try:
        from distributed import Client
    except ImportError:
        raise InputError("--dask needs the dask extra: pip install 'simloop[dask]'") from None
    try:
        return Client(address, timeout=10)
    except (OSError, TimeoutError) as exc:
        raise InputError(f"cannot reach the Dask scheduler at {address}: {exc}; check --dask") from None
