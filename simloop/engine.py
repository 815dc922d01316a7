"""One ngspice transient analysis, run in a spawned worker process, and a pool of such workers.

The engine knows nothing of harmonics and nothing of netlist screening: it receives a complete,
already screened circuit text (title line first, devices, ``.param``, ``.model``; no analysis card,
no ``.end``, no ``.control``), appends the ``.options``, ``.save`` and ``.tran`` cards, runs ngspice
through PySpice's shared-library binding and hands back the native (non-uniform) time points and
vectors as plain float64 arrays in a :class:`Trace`.

Why worker processes: ngspice is a per-process singleton; after a fatal error it refuses every
later circuit and may crash the process at exit. Each worker is a fresh interpreter started with
the ``spawn`` method; :class:`EnginePool` replaces a worker that crashed, hung or lost its engine,
and every failure reaches the caller as :class:`~simloop.errors.SimulationError` with the engine's
own words.

Isolation of a worker (done once, by its initializer, before ngspice starts):

- it works in an empty folder of its own (its current directory and ``HOME``); ngspice 39 sources
  ``./.spiceinit`` when one exists and otherwise the ``.spiceinit`` in the home folder of the
  *password database* (``getpwuid``), not ``$HOME``. So the worker's folder holds an empty
  ``.spiceinit``, which is the one ngspice reads: neither the caller's current folder nor the
  user's home folder can inject commands;
- its stdout and stderr (file descriptors 1 and 2) go to a log file in the pool's temporary folder,
  so nothing the engine or PySpice prints reaches the user's terminal (PySpice's logger is
  silenced as well, including its "Unsupported Ngspice version 39" warning);
- core dumps are switched off, and the interpreter leaves with ``os._exit`` so that ngspice's own
  tear-down (which may abort after a fatal error) never runs.

Test hook: when the environment variable ``SIMLOOP_TEST_FAULT`` holds ``segv:<circuit>`` (or
``hang:<circuit>``), a worker that receives a request whose ``circuit`` equals ``<circuit>`` kills
itself with SIGSEGV (or sleeps for an hour, ignoring its timeout). Workers read the variable from
the environment they were spawned with. It exists so that the tests can crash or hang a real
worker; it does nothing when unset.
"""

from __future__ import annotations

import atexit
import concurrent.futures
import math
import multiprocessing
import os
import re
import shutil
import tempfile
import threading
import time
from collections.abc import Mapping
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .errors import EngineUnavailable, InputError, SimulationError

#: Import-hygiene tests skip this module (it runs PySpice, though only inside worker functions).
_HEAVY = True

#: Soname of ngspice's shared library (Debian package libngspice0), used when
#: NGSPICE_LIBRARY_PATH is unset.
NGSPICE_LIBRARY_DEFAULT = "libngspice.so.0"

#: Environment variable of the test hook (see the module docstring).
TEST_FAULT_ENV = "SIMLOOP_TEST_FAULT"

_HALT_WAIT = 5.0  # [s] how long a worker waits for ngspice's thread to stop after bg_halt
_MAX_CRASHES = 2  # a request whose worker dies this often fails (once may be a neighbour's crash)
_MAX_RESUBMITS = 4  # resubmissions for reasons other than a crash (retired or cancelled worker)
_WATCHDOG_PERIOD = 0.2  # [s]

_OPTION_NAME = re.compile(r"[A-Za-z][A-Za-z0-9_]*")
_OPTION_VALUE = re.compile(r"[A-Za-z0-9_.+\-]*")
_SAVE_EXPR = re.compile(r"[A-Za-z0-9_.#:@\[\]()+\-,/]+")
#: Cards the engine writes itself (analyses, .end) or never lets through (.control blocks).
_CARDS_REFUSED = (
    ".end", ".control", ".endc", ".tran", ".ac", ".dc", ".op", ".noise", ".tf", ".sens",
    ".pz", ".disto", ".pss", ".sp",
)


# --------------------------------------------------------------------------------------------
# Request and result
# --------------------------------------------------------------------------------------------


def _check_positive(value: float, what: str, hint: str) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what}: {value!r} is not a number; {hint}") from None
    if not math.isfinite(number) or number <= 0.0:
        raise InputError(f"{what}: {value!r} must be a positive finite number; {hint}")
    return number


@dataclass(frozen=True, slots=True)
class TransientRequest:
    """One transient analysis to run: circuit text plus the ``.tran`` settings.

    Parameters
    ----------
    netlist : str
        Complete, screened circuit text: title line first (must not be empty), devices,
        ``.param``, ``.model``; no analysis card, no ``.end``, no ``.control``.
    stop : float
        TSTOP, end of the analysis [s].
    step : float
        TSTEP, the print step [s] (ngspice requires it; it also bounds the first internal step).
    tmax : float
        TMAX, the largest internal time step [s]. It sets the accuracy of the harmonics: the
        trapezoidal rule's error grows as TMAX squared.
    start : float
        TSTART [s]: points before it are computed but not kept.
    uic : bool
        Skip the operating point and start from the ``.ic`` / zero state (ngspice then drops
        the t = 0 point).
    save : tuple of str
        ngspice save expressions (``"v(out)"``, ``"i(v1)"``, ``"v(a,b)"``); empty saves all.
    options : tuple of (str, str)
        Extra ``.options`` as (name, value) pairs, e.g. ``(("reltol", "1e-4"),)``; an empty
        value gives a flag option.
    timeout : float
        Wall-clock limit of the run in the worker [s].
    circuit : str
        Name used in error messages.
    parameters : tuple of (str, float)
        Parameter values, for error messages only.

    Raises
    ------
    InputError
        When a time is not positive and finite, ``start >= stop``, the netlist is empty, starts
        with an empty title line or holds a card the engine adds itself, or a save expression or
        option is malformed.
    """

    netlist: str
    stop: float
    step: float
    tmax: float
    start: float = 0.0
    uic: bool = False
    save: tuple[str, ...] = ()
    options: tuple[tuple[str, str], ...] = ()
    timeout: float = 60.0
    circuit: str = "netlist"
    parameters: tuple[tuple[str, float], ...] = ()

    def __post_init__(self) -> None:
        name = self.circuit
        object.__setattr__(self, "save", tuple(self.save))
        object.__setattr__(self, "options", tuple(tuple(option) for option in self.options))
        try:
            parameters = tuple((str(key), float(value)) for key, value in self.parameters)
        except (TypeError, ValueError):
            raise InputError(
                f"{name}: parameters {self.parameters!r} must be (name, number) pairs"
            ) from None
        object.__setattr__(self, "parameters", parameters)
        hint = "write it in seconds, e.g. 1e-6"
        stop = _check_positive(self.stop, f"{name}: transient stop time", hint)
        _check_positive(self.step, f"{name}: transient print step", hint)
        _check_positive(self.tmax, f"{name}: transient maximum step TMAX", hint)
        _check_positive(self.timeout, f"{name}: engine timeout", "give seconds, e.g. 60")
        start = float(self.start)
        if not math.isfinite(start) or not 0.0 <= start < stop:
            raise InputError(
                f"{name}: transient start time {self.start!r} must satisfy 0 <= start < stop "
                f"({stop!r} s)"
            )
        if not isinstance(self.netlist, str) or not self.netlist.strip():
            raise InputError(f"{name}: the netlist text is empty; pass the circuit text")
        lines = self.netlist.splitlines()
        if not lines[0].strip():
            raise InputError(
                f"{name}: the netlist's first line is its title and must not be empty; "
                "put a title line first"
            )
        for number, line in enumerate(lines[1:], start=2):
            words = line.split()
            card = words[0].lower() if words else ""
            # ngspice opens a control block on any card that starts with .control (or .endc)
            if card in _CARDS_REFUSED or card.startswith((".control", ".endc")):
                raise InputError(
                    f"{name}: netlist line {number} holds {words[0]}, which the engine adds "
                    "itself; remove analysis cards, .control blocks and .end"
                )
        for expr in self.save:
            if not isinstance(expr, str) or _SAVE_EXPR.fullmatch(expr) is None:
                raise InputError(
                    f"{name}: save expression {expr!r} is malformed; write v(node), "
                    "v(node1,node2) or i(vsource)"
                )
        for option in self.options:
            if (
                len(option) != 2
                or _OPTION_NAME.fullmatch(str(option[0])) is None
                or _OPTION_VALUE.fullmatch(str(option[1])) is None
            ):
                raise InputError(
                    f"{name}: option {option!r} is malformed; give (name, value) pairs "
                    "such as ('reltol', '1e-4')"
                )


@dataclass(frozen=True, slots=True)
class Trace:
    """The result of one transient analysis: the engine's own time points and vectors.

    Parameters
    ----------
    time : array of float
        The accepted time points [s], strictly increasing, not uniform.
    vectors : mapping of str to array of float
        Every saved vector other than time, by ngspice's lower-case name: node voltages by
        node name (``"out"``) [V], voltage-source currents as ``"v1#branch"`` [A].
    engine_version : str
        The engine's own version string, e.g. ``"ngspice-39"``.
    wall_time : float
        Time the worker spent on the run, from loading to converted arrays [s].
    points : int
        Number of time points.
    """

    time: NDArray[np.float64] = field(repr=False)
    vectors: Mapping[str, NDArray[np.float64]] = field(repr=False)
    engine_version: str
    wall_time: float
    points: int


@dataclass(frozen=True, slots=True)
class _Outcome:
    """What a worker sends back: a trace, or an error; ``retire`` asks for a fresh worker."""

    trace: Trace | None = None
    error: BaseException | None = None
    retire: bool = False
    resubmit: bool = False


# --------------------------------------------------------------------------------------------
# The deck and the engine's words
# --------------------------------------------------------------------------------------------


def _spice_number(value: float) -> str:
    return repr(float(value))


def transient_deck(request: TransientRequest) -> str:
    """The complete text handed to ngspice: the netlist plus options, saves, ``.tran``, ``.end``.

    Parameters
    ----------
    request : TransientRequest

    Returns
    -------
    str

    Notes
    -----
    The analysis card is ``.tran TSTEP TSTOP TSTART TMAX [uic]``, all four times always written,
    as the ngspice manual's ``.tran`` section allows.

    Examples
    --------
    >>> r = TransientRequest("divider\\nV1 in 0 1\\nR1 in out 1k\\nR2 out 0 1k",
    ...                      stop=1e-3, step=1e-6, tmax=1e-6, save=("v(out)",))
    >>> print(transient_deck(r).splitlines()[-2])
    .tran 1e-06 0.001 0.0 1e-06
    """
    lines = [request.netlist.rstrip("\n")]
    if request.options:
        lines.append(
            ".options "
            + " ".join(name if not value else f"{name}={value}" for name, value in request.options)
        )
    if request.save:
        lines.append(".save " + " ".join(request.save))
    card = (
        f".tran {_spice_number(request.step)} {_spice_number(request.stop)} "
        f"{_spice_number(request.start)} {_spice_number(request.tmax)}"
    )
    if request.uic:
        card += " uic"
    lines += [card, ".end"]
    return "\n".join(lines) + "\n"


def _expected_vectors(save: tuple[str, ...]) -> dict[str, tuple[str, ...]]:
    """ngspice vector names each save expression must produce (``v(a,b)`` saves a and b)."""
    expected: dict[str, tuple[str, ...]] = {}
    for expr in save:
        text = expr.strip().lower()
        match = re.fullmatch(r"([vi])\((.+)\)", text)
        if match is None:
            expected[expr] = (text,)
        elif match.group(1) == "v":
            expected[expr] = tuple(
                node.strip() for node in match.group(2).split(",") if node.strip() not in ("0", "")
            )
        else:
            expected[expr] = (match.group(2).strip() + "#branch",)
    return expected


#: stderr lines that are progress chatter, not errors.
_CHATTER = (
    "warning",
    "note",
    "trying gmin",
    "supplies reduced",
    "using ",
    "doanalyses: pause requested",
    "run simulation interrupted",
    "reference value",
)
_ERROR_MARK = re.compile(
    r"error|too small|singular|abort|cannot|can't|could not|unknown|undefined|no such|"
    r"not found|fatal|failed|illegal|invalid|unable|not parsed|recover",
    re.IGNORECASE,
)
_TSTEP_TIME = re.compile(r"time\s*=\s*([-+0-9.eE]+)")


def _split_stream(messages: list[str]) -> list[str]:
    """The stderr lines among ngspice's ``send_char`` messages (``"stderr <text>"``)."""
    out = []
    for message in messages:
        prefix, _, content = message.partition(" ")
        if prefix == "stderr":
            out.append(content.strip())
    return out


def _error_lines(messages: list[str]) -> tuple[list[str], bool]:
    """(relevant stderr lines, whether any of them is a real error)."""
    relevant: list[str] = []
    failed = False
    for line in _split_stream(messages):
        low = line.lower()
        if not line or (low.startswith(_CHATTER) and "singular matrix" not in low):
            continue
        if line not in relevant:
            relevant.append(line)
        if _ERROR_MARK.search(line):
            failed = True
    return relevant, failed


def _engine_words(messages: list[str], *, limit: int = 600) -> str:
    relevant, _ = _error_lines(messages)
    if not relevant:
        relevant = [line for line in _split_stream(messages) if line][-3:]
    words = " | ".join(relevant)
    return words if len(words) <= limit else words[: limit - 3] + "..."


def _where(request: TransientRequest) -> str:
    if not request.parameters:
        return request.circuit
    values = ", ".join(f"{name}={value:g}" for name, value in request.parameters)
    return f"{request.circuit} [{values}]"


def _error(request: TransientRequest, message: str, engine_message: str = "") -> SimulationError:
    return SimulationError(
        message,
        circuit=request.circuit,
        parameters=dict(request.parameters),
        engine_message=engine_message,
    )


# --------------------------------------------------------------------------------------------
# Worker side
# --------------------------------------------------------------------------------------------


class _WorkerState:
    """Per-process engine state of a worker (module global ``_STATE``)."""

    def __init__(self) -> None:
        self.ng: Any = None
        self.version = ""
        self.init_error = ""
        self.poisoned = ""
        self.messages: list[str] = []
        self.collecting = False
        self.finished = threading.Event()
        self.workdir = ""
        self.log: Any = None


_STATE = _WorkerState()


def _engine_class() -> type:
    """PySpice's NgSpiceShared with the two callbacks simloop needs (PySpice imported here)."""
    from PySpice.Spice.NgSpice.Shared import NgSpiceShared

    class _Engine(NgSpiceShared):
        def send_char(self, message: str, ngspice_id: int) -> int:
            if _STATE.collecting:
                _STATE.messages.append(message)
            return 0

        @staticmethod
        def _background_thread_running(exited: bool, ngspice_id: int, user_data: Any) -> int:
            # ngspice calls this with False when its background thread starts and True when it
            # has finished. PySpice's own version returns None, which cffi reports on stderr.
            if exited:
                _STATE.finished.set()
            return 0

    return _Engine


def _leave_quietly() -> None:
    """At interpreter exit: remove the work folder, skip ngspice's tear-down (may abort)."""
    try:
        if _STATE.workdir:
            shutil.rmtree(_STATE.workdir, ignore_errors=True)
    finally:
        os._exit(0)


def _watch_parent(parent: int, period: float = 0.5) -> None:
    """Leave (``os._exit``) as soon as the process that started this worker is gone.

    A parent killed with SIGKILL cannot close its pool; its workers would linger as orphans
    holding an engine. The worker notices because it is re-parented (``os.getppid`` changes).
    """

    def watch() -> None:
        while True:
            if os.getppid() != parent:
                os._exit(0)
            time.sleep(period)

    threading.Thread(target=watch, name="simloop-parent-watch", daemon=True).start()


def _worker_init(pool_dir: str, parent: int | None = None) -> None:
    """Initializer of every engine worker: isolate, silence, start ngspice once."""
    import faulthandler
    import logging
    import warnings

    try:
        import resource

        _soft, hard = resource.getrlimit(resource.RLIMIT_CORE)
        resource.setrlimit(resource.RLIMIT_CORE, (0, hard))
    except (ImportError, ValueError, OSError):
        pass  # no core-dump limit on this platform
    # the pool's pid, not os.getppid(): a parent killed before this runs has already gone
    _watch_parent(parent if parent is not None else os.getppid())
    pid = os.getpid()
    log = open(os.path.join(pool_dir, f"w-{pid}.log"), "ab", buffering=0)  # noqa: SIM115
    _STATE.log = log
    os.dup2(log.fileno(), 1)
    os.dup2(log.fileno(), 2)
    faulthandler.enable(file=log)
    warnings.simplefilter("ignore")
    workdir = os.path.join(pool_dir, f"w-{pid}")
    os.makedirs(workdir, exist_ok=True)
    with open(os.path.join(workdir, ".spiceinit"), "w", encoding="ascii") as fh:
        fh.write("* empty on purpose: ngspice reads this one instead of the user's .spiceinit\n")
    os.chdir(workdir)
    os.environ["HOME"] = workdir
    os.environ.setdefault("NGSPICE_LIBRARY_PATH", NGSPICE_LIBRARY_DEFAULT)
    _STATE.workdir = workdir
    atexit.register(_leave_quietly)
    quiet = logging.getLogger("PySpice")
    quiet.setLevel(logging.CRITICAL + 1)
    quiet.propagate = False
    quiet.addHandler(logging.NullHandler())
    try:
        _STATE.ng = _engine_class().new_instance()
        banner = _STATE.ng.exec_command("version -s")
        match = re.search(r"ngspice-(\S+)", banner)
        _STATE.version = f"ngspice-{match.group(1)}" if match else "ngspice-unknown"
    except BaseException as exc:  # noqa: BLE001 - reported to the caller with each request
        _STATE.init_error = f"{type(exc).__name__}: {exc}"


def _require_engine() -> Any:
    if _STATE.init_error or _STATE.ng is None:
        library = os.environ.get("NGSPICE_LIBRARY_PATH", NGSPICE_LIBRARY_DEFAULT)
        reason = _STATE.init_error or "the worker initializer did not run"
        raise EngineUnavailable(
            f"ngspice could not be started in the engine worker ({reason}); install PySpice and "
            "ngspice's shared library (Debian: libngspice0) or point NGSPICE_LIBRARY_PATH "
            f"(now {library!r}) at it"
        )
    return _STATE.ng


def _worker_version() -> str:
    """Task: the engine's version string."""
    _require_engine()
    return _STATE.version


def _quiet(ng: Any, command: str) -> None:
    """Run an ngspice command whose complaints do not matter (halt, destroy, remcirc)."""
    from PySpice.Spice.NgSpice.Shared import NgSpiceCommandError

    try:
        ng.exec_command(command)
    except NgSpiceCommandError:
        pass


def _test_fault(circuit: str) -> None:
    spec = os.environ.get(TEST_FAULT_ENV, "")
    action, _, target = spec.partition(":")
    if not spec or target != circuit:
        return
    if action == "segv":
        import signal

        os.kill(os.getpid(), signal.SIGSEGV)
    elif action == "hang":
        time.sleep(3600.0)


def _worker_run(request: TransientRequest) -> _Outcome:
    """Task: one transient analysis in this worker's engine."""
    ng = _require_engine()
    if _STATE.poisoned:
        return _Outcome(resubmit=True, retire=True)
    _test_fault(request.circuit)
    started = time.perf_counter()
    _STATE.messages = []
    _STATE.finished.clear()
    _STATE.collecting = True
    try:
        return _Outcome(trace=_transient(ng, request, started))
    except SimulationError as exc:
        return _Outcome(error=exc, retire=bool(_STATE.poisoned))
    finally:
        _STATE.collecting = False
        _quiet(ng, "destroy all")
        _quiet(ng, "remcirc")


def _transient(ng: Any, request: TransientRequest, started: float) -> Trace:
    from PySpice.Spice.NgSpice.Shared import NgSpiceCircuitError, NgSpiceCommandError

    where = _where(request)
    messages = _STATE.messages
    _quiet(ng, "destroy all")
    try:
        ng.load_circuit(transient_deck(request))
    except NameError:
        # ngSpice_Circ returned 1: "ngspice.dll cannot recover and awaits to be detached"
        _STATE.poisoned = "the engine could not recover from a netlist error"
    except NgSpiceCircuitError:
        pass  # PySpice's guess from stdout; the stderr lines below decide
    _, load_failed = _error_lines(messages)
    if load_failed or _STATE.poisoned:
        words = _engine_words(messages)
        raise _error(
            request,
            f"{where}: the engine could not load the netlist: {words or 'no reason given'} "
            "(fix the netlist line it names)",
            words,
        )
    loaded = len(messages)
    try:
        ng.exec_command("bg_run")
    except NgSpiceCommandError:
        pass  # whatever it printed is judged below
    deadline = started + request.timeout
    finished = _STATE.finished.wait(max(0.0, deadline - time.perf_counter()))
    if not finished:
        _quiet(ng, "bg_halt")
        if not _STATE.finished.wait(_HALT_WAIT):
            _STATE.poisoned = "the engine did not stop after bg_halt"
        reached = _last_time(ng)
        progress = "" if reached is None else f"reached t = {reached:.6g} s of {request.stop:g} s"
        raise _error(
            request,
            f"{where}: transient did not finish within {request.timeout:g} s "
            "(raise --timeout or loosen TMAX)",
            "; ".join(part for part in (progress, _engine_words(messages[loaded:])) if part),
        )
    run_messages = messages[loaded:]
    relevant, failed = _error_lines(run_messages)
    words = _engine_words(run_messages)
    plot_name = _tran_plot(ng)
    time_points, vectors = _read_plot(ng, plot_name) if plot_name else (None, {})
    reached = float(time_points[-1]) if time_points is not None and time_points.size else None
    singular = next((line for line in relevant if "singular matrix" in line.lower()), None)
    if singular is not None:
        at_text = f"t = {reached:.6g} s" if reached is not None else "the initial time point"
        raise _error(
            request,
            f"{where}: singular matrix at {at_text} ({' '.join(singular.split())}); check for "
            "loops of voltage "
            "sources or inductors, floating nodes or capacitor-only cut sets, and break them (a "
            "series resistance, a resistor to ground)",
            words,
        )
    if any("timestep too small" in line.lower() for line in relevant):
        at = reached
        if at is None:
            match = next(
                (m for m in map(_TSTEP_TIME.search, relevant) if m is not None), None
            )
            at = float(match.group(1)) if match else None
        at_text = f"t = {at:.6g} s" if at is not None else "the initial time point"
        raise _error(
            request,
            f"{where}: timestep too small at {at_text} ({words}); smooth the "
            "discontinuity (finite rise and fall times, switch RON/ROFF, a snubber) or relax "
            "reltol",
            words,
        )
    if any("no data saved" in line.lower() for line in relevant):
        raise _error(
            request,
            f"{where}: nothing asked for could be saved ({words}); save nodes and voltage-source "
            "currents the netlist has, e.g. v(out), i(v1)",
            words,
        )
    if failed:
        raise _error(
            request,
            f"{where}: the transient failed ({words}); check for floating nodes and loops of "
            "voltage sources or inductors, or try uic",
            words,
        )
    if plot_name is None or time_points is None or time_points.size == 0:
        raise _error(
            request,
            f"{where}: the engine produced no transient data ({words or 'no message'}); "
            "check the netlist",
            words,
        )
    if reached is not None and reached < request.stop * (1.0 - 1e-9):
        raise _error(
            request,
            f"{where}: the transient stopped at t = {reached:.6g} s of {request.stop:g} s "
            f"({words or 'no message'})",
            words,
        )
    missing = [
        expr
        for expr, names in _expected_vectors(request.save).items()
        if any(name not in vectors for name in names)
    ]
    if missing:
        raise _error(
            request,
            f"{where}: no such vector {', '.join(missing)} in the results (saved: "
            f"{', '.join(sorted(vectors)) or 'none'}); save nodes and voltage-source currents "
            "the netlist has, e.g. v(out), i(v1)",
        )
    return Trace(
        time=time_points,
        vectors=vectors,
        engine_version=_STATE.version,
        wall_time=time.perf_counter() - started,
        points=int(time_points.size),
    )


def _tran_plot(ng: Any) -> str | None:
    names = [name for name in ng.plot_names if name.lower().startswith("tran")]
    return names[0] if names else None


def _read_plot(ng: Any, plot_name: str) -> tuple[NDArray[np.float64] | None, dict]:
    plot = ng.plot(None, plot_name)
    vectors: dict[str, NDArray[np.float64]] = {}
    time_points = None
    for name, vector in plot.items():
        data = np.array(np.real(vector._data), dtype=np.float64)
        if name.lower() == "time":
            time_points = data
        else:
            vectors[name.lower()] = data
    return time_points, vectors


def _last_time(ng: Any) -> float | None:
    try:
        name = _tran_plot(ng)
        if name is None:
            return None
        points, _ = _read_plot(ng, name)
        return float(points[-1]) if points is not None and points.size else None
    except Exception:  # noqa: BLE001 - progress report only
        return None


# --------------------------------------------------------------------------------------------
# Parent side: the pool
# --------------------------------------------------------------------------------------------


@dataclass(slots=True)
class _Generation:
    """One ProcessPoolExecutor and the dict of its processes (kept: shutdown() drops it)."""

    number: int
    executor: concurrent.futures.ProcessPoolExecutor
    processes: dict


@dataclass(slots=True)
class _Record:
    """One request's way through the pool."""

    request: TransientRequest
    outer: concurrent.futures.Future
    crashes: int = 0
    resubmits: int = 0
    inner: concurrent.futures.Future | None = None
    generation: _Generation | None = None
    running_since: float | None = None
    killed: bool = False


def _signal_name(code: int) -> str:
    import signal

    try:
        return f"signal {signal.Signals(-code).name}"
    except ValueError:
        return f"signal {-code}"


class EnginePool:
    """Worker processes that each run one ngspice transient at a time.

    Parameters
    ----------
    workers : int
        Number of worker processes (each holds one ngspice engine).
    max_tasks_per_child : int or None
        A worker is replaced by a fresh one after this many runs (bounds slow leaks). None, the
        default, keeps workers: on Python 3.11 the executor's recycling can deadlock when runs
        are queued while a worker retires (CPython issue gh-115634; seen here with batches of
        shooting runs), and worker memory was measured flat without it (+0.7 MB over 1000
        points, bench/README.md).
    kill_grace : float
        Safety net [s]: a run still busy ``timeout + kill_grace`` seconds (plus the longest
        timeout in flight, for the time it may have waited in the queue) after it was handed to
        a worker is treated as a hung engine: the pool's workers are killed and replaced, the run
        fails with a timeout, the others are resubmitted.

    Raises
    ------
    InputError
        When ``workers`` or ``max_tasks_per_child`` is not a positive integer.

    Notes
    -----
    Failure handling, all invisible to the caller except for the failed request itself:

    - a worker that dies (segfault, ``os._exit``, killed) breaks its ProcessPoolExecutor; the pool
      starts a new one and runs every request that was in flight once more (a crash may have been
      a neighbour's); a request whose worker dies twice fails with ``SimulationError("<circuit>:
      the engine worker crashed (...)")``;
    - a worker whose engine can no longer be trusted (fatal netlist error, halt without effect)
      reports so with its result; the pool retires its executor and resubmits what was queued;
    - the timeout is enforced in the worker (``bg_halt``); the kill grace above is the backstop.

    Workers are started with ``spawn``: a script that uses a pool must keep its top-level code
    under ``if __name__ == "__main__":``, or each worker would run it again on import.

    Examples
    --------
    >>> rc = "rc\\nV1 in 0 1\\nR1 in out 1k\\nR2 out 0 1k"
    >>> with EnginePool(1) as pool:
    ...     trace = pool.run(TransientRequest(rc, stop=1e-3, step=1e-5, tmax=1e-5))
    >>> round(float(trace.vectors["out"][-1]), 6)
    0.5
    """

    def __init__(
        self, workers: int = 1, *, max_tasks_per_child: int | None = None,
        kill_grace: float = 30.0,
    ) -> None:
        for what, value in (("workers", workers), ("max_tasks_per_child", max_tasks_per_child)):
            if what == "max_tasks_per_child" and value is None:
                continue
            if not isinstance(value, int) or isinstance(value, bool) or value < 1:
                raise InputError(f"EnginePool {what}: {value!r} must be a positive integer")
        self._workers = workers
        self._max_tasks = max_tasks_per_child
        self._kill_grace = _check_positive(kill_grace, "EnginePool kill_grace", "give seconds")
        self._lock = threading.RLock()
        self._closed = False
        _sweep_stale_dirs()
        self._dir = tempfile.mkdtemp(prefix=f"{_DIR_PREFIX}{os.getpid()}-")
        self._count = 0
        self._current: _Generation | None = None
        self._retired: list[_Generation] = []
        self._inflight: set[int] = set()
        self._records: dict[int, _Record] = {}
        self._stop = threading.Event()
        self._watchdog: threading.Thread | None = None

    # -- context manager ----------------------------------------------------------------------

    def __enter__(self) -> EnginePool:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    # -- public -------------------------------------------------------------------------------

    def submit(self, request: TransientRequest) -> concurrent.futures.Future[Trace]:
        """Queue one run; the future yields a :class:`Trace` or raises SimulationError.

        Parameters
        ----------
        request : TransientRequest

        Returns
        -------
        concurrent.futures.Future of Trace

        Raises
        ------
        TypeError
            When ``request`` is not a TransientRequest.
        RuntimeError
            When the pool is closed.
        """
        if not isinstance(request, TransientRequest):
            kind = type(request).__name__
            raise TypeError(f"EnginePool.submit needs a TransientRequest, not {kind}")
        with self._lock:
            if self._closed:
                raise RuntimeError("EnginePool is closed")
        record = _Record(request=request, outer=concurrent.futures.Future())
        record.outer.add_done_callback(lambda outer: self._cancel_inner(record))
        self._dispatch(record)
        return record.outer

    def run(self, request: TransientRequest) -> Trace:
        """Run one request and wait for its :class:`Trace` (raises SimulationError)."""
        return self.submit(request).result()

    def close(self) -> None:
        """Wait for the runs in flight, stop the workers and remove the pool's temporary folder."""
        with self._lock:
            if self._closed:
                return
            self._closed = True
            generations = self._retired + ([self._current] if self._current else [])
            self._current = None
            self._retired = []
        for generation in generations:
            generation.executor.shutdown(wait=True)
        self._stop.set()
        if self._watchdog is not None and self._watchdog is not threading.current_thread():
            self._watchdog.join(timeout=5.0)
        shutil.rmtree(self._dir, ignore_errors=True)

    # -- internals ----------------------------------------------------------------------------

    def _new_generation(self) -> _Generation:
        executor = concurrent.futures.ProcessPoolExecutor(
            max_workers=self._workers,
            mp_context=multiprocessing.get_context("spawn"),
            initializer=_worker_init,
            initargs=(self._dir, os.getpid()),
            max_tasks_per_child=self._max_tasks,
        )
        self._count += 1
        return _Generation(self._count, executor, executor._processes)

    def _generation(self) -> _Generation:
        with self._lock:
            if self._current is None:
                self._current = self._new_generation()
            return self._current

    def _replace(self, generation: _Generation) -> None:
        """Retire ``generation`` (if still current) and start a fresh one lazily."""
        with self._lock:
            if self._current is not generation:
                return
            self._current = None
            self._retired = [g for g in self._retired if _alive(g)] + [generation]
        generation.executor.shutdown(wait=False, cancel_futures=True)

    def _submit_raw(self, fn: Any, *args: Any) -> tuple[_Generation, concurrent.futures.Future]:
        for _ in range(3):
            generation = self._generation()
            try:
                return generation, generation.executor.submit(fn, *args)
            except BrokenProcessPool:
                self._replace(generation)
            except RuntimeError as exc:
                if "shutdown" not in str(exc):
                    raise  # e.g. started from a spawned child's import: needs a __main__ guard
                self._replace(generation)
        raise SimulationError("the engine pool could not start a worker process")

    def _dispatch(self, record: _Record) -> None:
        with self._lock:
            if self._closed:
                self._fail(record, _error(record.request, f"{_where(record.request)}: the engine "
                                          "pool was closed before the run started"))
                return
            try:
                generation, inner = self._submit_raw(_worker_run, record.request)
            except SimulationError as exc:
                self._fail(record, exc)
                return
            record.inner, record.generation, record.running_since = inner, generation, None
            self._records[id(record)] = record
            self._inflight.add(id(record))
            self._start_watchdog()
        inner.add_done_callback(lambda done: self._settle(record, generation, done))

    def _settle(
        self, record: _Record, generation: _Generation, inner: concurrent.futures.Future
    ) -> None:
        with self._lock:
            self._inflight.discard(id(record))
            self._records.pop(id(record), None)
        request = record.request
        try:
            outcome = inner.result()
            if outcome.retire:
                self._replace(generation)
            if record.outer.cancelled():
                return
        except concurrent.futures.CancelledError:
            if record.outer.cancelled():
                return
            self._again(record, "cancelled with a retired worker")
            return
        except BrokenProcessPool:
            detail = _crash_detail(generation, self._dir)
            self._replace(generation)
            if record.outer.cancelled():
                return
            if record.killed:
                self._fail(record, _error(
                    request,
                    f"{_where(request)}: transient did not finish within {request.timeout:g} s "
                    "and the engine did not respond to halt; its worker was killed "
                    "(raise --timeout or loosen TMAX)",
                ))
                return
            record.crashes += 1
            if record.crashes >= _MAX_CRASHES:
                self._fail(record, _error(
                    request, f"{_where(request)}: the engine worker crashed ({detail})", detail
                ))
            else:
                self._dispatch(record)
            return
        except BaseException as exc:  # noqa: BLE001 - EngineUnavailable and bugs go to the caller
            self._fail(record, exc)
            return
        if outcome.resubmit:
            self._again(record, "its worker had lost its engine")
        elif outcome.error is not None:
            self._fail(record, outcome.error)
        else:
            trace = outcome.trace
            trace.time.flags.writeable = False
            for array in trace.vectors.values():
                array.flags.writeable = False
            _remember_version(trace.engine_version)
            try:
                record.outer.set_result(trace)
            except concurrent.futures.InvalidStateError:
                pass

    def _again(self, record: _Record, why: str) -> None:
        record.resubmits += 1
        if record.resubmits > _MAX_RESUBMITS:
            self._fail(record, _error(
                record.request, f"{_where(record.request)}: the run was resubmitted "
                f"{_MAX_RESUBMITS} times ({why}); the engine workers keep failing"
            ))
        else:
            self._dispatch(record)

    @staticmethod
    def _fail(record: _Record, exc: BaseException) -> None:
        try:
            record.outer.set_exception(exc)
        except concurrent.futures.InvalidStateError:
            pass

    def _cancel_inner(self, record: _Record) -> None:
        if record.outer.cancelled() and record.inner is not None:
            record.inner.cancel()

    def _start_watchdog(self) -> None:
        if self._watchdog is None:
            self._watchdog = threading.Thread(
                target=self._watch, name="simloop-engine-watchdog", daemon=True
            )
            self._watchdog.start()

    def _watch(self) -> None:
        while not self._stop.wait(_WATCHDOG_PERIOD):
            now = time.monotonic()
            with self._lock:
                records = [self._records[key] for key in self._inflight if key in self._records]
            longest = max((r.request.timeout for r in records), default=0.0)
            for record in records:
                if record.inner is None or not record.inner.running():
                    continue
                if record.running_since is None:
                    record.running_since = now
                    continue
                limit = record.request.timeout + longest + self._kill_grace
                if not record.killed and now - record.running_since > limit:
                    record.killed = True
                    _kill(record.generation)

    def _ask_version(self, timeout: float = 120.0) -> str:
        generation, future = self._submit_raw(_worker_version)
        try:
            return future.result(timeout=timeout)
        except BrokenProcessPool:
            self._replace(generation)
            detail = _crash_detail(generation, self._dir)
            raise EngineUnavailable(
                f"the engine worker died while starting ngspice ({detail})"
            ) from None


_DIR_PREFIX = "simloop-engine-"


def _sweep_stale_dirs() -> None:
    """Remove pool folders left by processes that were killed before they could clean up."""
    root = tempfile.gettempdir()
    try:
        names = os.listdir(root)
    except OSError:
        return
    for name in names:
        match = re.fullmatch(re.escape(_DIR_PREFIX) + r"(\d+)-\w+", name)
        path = os.path.join(root, name)
        if match is None or not os.path.isdir(path):
            continue
        try:
            if os.stat(path).st_uid != os.getuid():
                continue
            os.kill(int(match.group(1)), 0)  # the owner still runs: leave it
        except ProcessLookupError:
            shutil.rmtree(path, ignore_errors=True)
        except (OSError, ValueError):
            continue


def _alive(generation: _Generation) -> bool:
    return any(process.is_alive() for process in list(generation.processes.values()))


def _kill(generation: _Generation | None) -> None:
    if generation is None:
        return
    for process in list(generation.processes.values()):
        try:
            process.kill()
        except (OSError, ValueError, AttributeError):
            pass


def _crash_detail(generation: _Generation, pool_dir: str) -> str:
    """How the dead worker(s) ended: exit status and the first fatal line of their log."""
    import signal

    processes = list(generation.processes.items())
    deadline = time.monotonic() + 1.0  # the dead worker's pipe closes just before it is reapable
    while time.monotonic() < deadline and all(p.exitcode is None for _, p in processes):
        time.sleep(0.01)
    parts = []
    for pid, process in processes:
        code = process.exitcode
        if code in (None, 0, -signal.SIGTERM):
            continue
        status = _signal_name(code) if code < 0 else f"exit code {code}"
        note = _log_line(os.path.join(pool_dir, f"w-{pid}.log"))
        parts.append(f"pid {pid}: {status}" + (f", {note}" if note else ""))
    return "; ".join(parts) or "a worker process ended abruptly"


def _log_line(path: str) -> str:
    try:
        with open(path, encoding="utf-8", errors="replace") as fh:
            lines = [line.strip() for line in fh.read()[-4000:].splitlines() if line.strip()]
    except OSError:
        return ""
    fatal = [line for line in lines if line.startswith("Fatal Python error")]
    return (fatal or lines[-1:] or [""])[0]


# --------------------------------------------------------------------------------------------
# Module-level conveniences
# --------------------------------------------------------------------------------------------

_DEFAULT_LOCK = threading.Lock()
_DEFAULT_POOL: EnginePool | None = None
_VERSION: str | None = None


def _remember_version(version: str) -> None:
    global _VERSION
    if version and _VERSION is None:
        _VERSION = version


def _default_pool() -> EnginePool:
    global _DEFAULT_POOL
    with _DEFAULT_LOCK:
        if _DEFAULT_POOL is None or _DEFAULT_POOL._closed:
            _DEFAULT_POOL = EnginePool(1)
            atexit.register(_DEFAULT_POOL.close)
        return _DEFAULT_POOL


def shared_pool() -> EnginePool:
    """The process-wide pool of one engine worker (started on first use, closed at exit)."""
    return _default_pool()


def run_transient(request: TransientRequest, *, pool: EnginePool | None = None) -> Trace:
    """Run one ngspice transient analysis in a worker process.

    Parameters
    ----------
    request : TransientRequest
        Circuit text and ``.tran`` settings.
    pool : EnginePool or None
        Pool to run in; None uses a module-wide pool of one worker, started on first use and
        closed at interpreter exit.

    Returns
    -------
    Trace
        The engine's time points [s] and vectors [V, A] as read-only float64 arrays.

    Raises
    ------
    SimulationError
        Load error, timestep too small, no convergence, missing saved vector, timeout, crashed
        worker: the message names the circuit, its parameters and the engine's words.
    EngineUnavailable
        When PySpice or ngspice's shared library cannot be loaded in the worker.

    Notes
    -----
    ngspice integrates with the trapezoidal rule by default; its local truncation error per step
    is proportional to h^3 times the third derivative, so the error of a harmonic falls as
    TMAX^2 when TMAX bounds the step h.

    References
    ----------
    H. Vogt, G. Atkinson, P. Nenzi, "Ngspice User's Manual, version 39", 2023: section
    ".tran: Transient Analysis" and chapter "ngspice as shared library".

    Examples
    --------
    A resistive divider settles at half its 1 V supply:

    >>> rc = "divider\\nV1 in 0 1\\nR1 in out 1k\\nR2 out 0 1k"
    >>> trace = run_transient(TransientRequest(rc, stop=1e-3, step=1e-5, tmax=1e-5))
    >>> round(float(trace.vectors["out"][-1]), 6), trace.engine_version.startswith("ngspice-")
    (0.5, True)
    """
    return (pool or _default_pool()).run(request)


def engine_version(*, pool: EnginePool | None = None) -> str:
    """The engine's own version string (``"ngspice-39"``), asked of a worker once per process.

    Parameters
    ----------
    pool : EnginePool or None
        Pool whose worker to ask; None uses the module-wide pool.

    Returns
    -------
    str

    Raises
    ------
    EngineUnavailable
        When the worker cannot start ngspice.
    """
    global _VERSION
    if _VERSION is None:
        _VERSION = (pool or _default_pool())._ask_version()
    return _VERSION


def engine_available() -> tuple[bool, str]:
    """Whether ngspice can be run, without raising.

    Returns
    -------
    (bool, str)
        ``(True, "ngspice-39")`` when a worker started the engine, else ``(False, reason)``.
    """
    try:
        return True, engine_version()
    except Exception as exc:  # noqa: BLE001 - the point is not to raise
        return False, str(exc) or type(exc).__name__
