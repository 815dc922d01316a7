"""Engine faults are contained: each is caused for real, and each fails only its own point.

Every fault here really happens in a real ngspice worker (no mocks):

- a worker that segfaults: the engine's test hook ``SIMLOOP_TEST_FAULT=segv:<circuit>``, set in
  the environment before the pool (and so its spawned workers) is created; the circuit name is
  the netlist's file stem;
- a worker that hangs and ignores its timeout: ``SIMLOOP_TEST_FAULT=hang:<circuit>``;
- a transient that is genuinely too long for its ``--timeout`` (a tiny TMAX at 50 Hz);
- "timestep too small": a voltage-controlled switch that controls itself through 1 kOhm, so the
  node must flip between two states in zero time (the mechanism of tests/test_engine.py);
- a singular matrix: two voltage sources in parallel (ngspice: "singular matrix: check node
  vs#branch").

For each: the point fails with a one-line reason naming the circuit, the parent survives (exit 2,
no traceback), the worker is replaced (the next run in the same pool works), a sweep or check
finishes its other points, and every finished point is in the results store.

The runs that work are resistive dividers on a sine, whose output is known without simloop:
v(out) = V * R2 / (R1 + R2), a pure sine (voltage divider; common practice).
"""

from __future__ import annotations

import json
import os
import re
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from simloop.analyse import RunSettings, run_circuit
from simloop.engine import TEST_FAULT_ENV, EnginePool
from simloop.errors import SimulationError
from simloop.netlist import load_circuit
from simloop.steady import SteadySettings

pytestmark = pytest.mark.engine

SIMLOOP = Path(sys.executable).parent / "simloop"
HARMONICS = 3

#: 1 V, 50 Hz sine into a divider of 1 kOhm over R2.
DIVIDER = """* resistive divider on a 50 Hz sine
.param r2=1k
Vs in 0 SIN(0 1 50)
R1 in out 1k
R2 out 0 {r2}
.end
"""

#: The same divider with the drive frequency as a parameter (for too-long transients).
SLOW_DIVIDER = """* resistive divider, drive frequency as a parameter
.param f0=50
Vs in 0 SIN(0 1 {f0})
R1 in out 1k
R2 out 0 1k
.end
"""

#: A 1.5 V divider with a self-controlled switch on the side. Through rsw = 1 Ohm the switch
#: latches (on: v(a) = 100/101 vdd stays above VT - VH = 0.4 V) and nothing happens to v(out);
#: through rsw = 1 kOhm, on gives v(a) = vdd/11 < 0.4 V, off gives v(a) ~ vdd > 0.6 V, so the
#: node must flip in zero time: ngspice stops with "Timestep too small" (ngspice manual,
#: "Switches": on above VT + VH, off below VT - VH; common practice).
LATCH_DIVIDER = """* divider with a self-switching side branch
.param rsw=1
Vs in 0 SIN(0 1.5 50)
R1 in out 1k
R2 out 0 1k
Rs in a {rsw}
S1 a 0 a 0 sw
.model sw SW(VT=0.5 VH=0.1 RON=100 ROFF=1meg)
.end
"""

#: Two voltage sources in parallel: no solution at all (singular MNA matrix).
SOURCE_LOOP = """* two sources in parallel: a loop of voltage sources
Vs in 0 SIN(0 1 50)
V2 in 0 DC 0.5
R1 in out 1k
R2 out 0 1k
.end
"""


def write(folder: Path, name: str, text: str) -> Path:
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


def simloop(*args: str, cwd: Path, fault: str | None = None,
            timeout: float = 120.0) -> subprocess.CompletedProcess[str]:
    """The real console script; ``fault`` goes into SIMLOOP_TEST_FAULT of its environment."""
    if not SIMLOOP.is_file():
        pytest.fail(f"console script {SIMLOOP} is missing; install simloop: pip install -e .",
                    pytrace=False)
    env = dict(os.environ, MPLBACKEND="Agg")
    env.setdefault("NGSPICE_LIBRARY_PATH", "libngspice.so.0")
    env.pop(TEST_FAULT_ENV, None)
    if fault is not None:
        env[TEST_FAULT_ENV] = fault
    return subprocess.run([str(SIMLOOP), *args], cwd=cwd, env=env, capture_output=True,
                          text=True, timeout=timeout, check=False)


def one_error_line(proc: subprocess.CompletedProcess[str]) -> str:
    """Exit 2, no traceback, exactly one ``error`` line on stderr (``wrote`` lines aside)."""
    assert proc.returncode == 2, (proc.returncode, proc.stdout, proc.stderr)
    assert "Traceback" not in proc.stdout + proc.stderr
    errors = [ln for ln in proc.stderr.splitlines() if not ln.startswith("wrote ")]
    assert len(errors) == 1 and ": error: " in errors[0], proc.stderr
    return errors[0]


def fundamental_amplitude(harmonics: list[dict]) -> float:
    return next(h["sim_v"] for h in harmonics if h["n"] == 1)


def stored(db: Path) -> dict[str, tuple[str, str | None]]:
    """``{parameters JSON: (status, error)}`` of every point in a results store (plain SQL)."""
    with sqlite3.connect(db) as connection:
        rows = connection.execute("SELECT parameters, status, error FROM points").fetchall()
    return {params: (status, error) for params, status, error in rows}


def assert_divider(result, *, r2: float) -> None:
    """A converged run of DIVIDER: v(out) = 1 V * r2 / (1 kOhm + r2), pure sine, no DC."""
    assert result.converged
    amplitude = result.simulated.amplitude
    # The divider is exact at every engine point; T/2000 between points bounds the spline
    # resampling error by 5/384 (2 pi / 2000)^4 = 1.3e-12 (cubic-spline error bound; common
    # practice); 1e-10 leaves room for the solver's rounding.
    assert amplitude[1] == pytest.approx(r2 / (1e3 + r2), rel=1e-10)
    assert abs(amplitude[0]) < 1e-9 and max(amplitude[2:]) < 1e-9


SETTINGS = RunSettings(harmonics=HARMONICS, probe="v(out)")


@pytest.fixture(scope="module")
def pool():
    """One engine worker shared by the API tests that do not need the test hook."""
    saved = os.environ.pop(TEST_FAULT_ENV, None)
    try:
        with EnginePool(1) as shared:
            yield shared
    finally:
        if saved is not None:
            os.environ[TEST_FAULT_ENV] = saved


# ------------------------------------------------------------------------------ Python API
def test_run_circuit_segfaulting_worker_fails_point_and_pool_recovers(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    victim = load_circuit(write(tmp_path, "victim.cir", DIVIDER))
    divider = load_circuit(write(tmp_path, "divider.cir", DIVIDER))
    monkeypatch.setenv(TEST_FAULT_ENV, "segv:victim")  # read by the workers spawned below
    with EnginePool(1) as crashing:
        with pytest.raises(SimulationError) as caught:
            run_circuit(victim, settings=SETTINGS, pool=crashing)
        message = str(caught.value)
        assert "\n" not in message
        assert re.search(r"^victim \[r2=1000\]: the engine worker crashed \(.*SIGSEGV", message), message
        assert caught.value.circuit == "victim" and caught.value.parameters == {"r2": 1e3}
        # the same pool, a new worker: the next circuit runs
        assert_divider(run_circuit(divider, values={"r2": 3e3}, settings=SETTINGS, pool=crashing),
                       r2=3e3)


def test_run_circuit_hung_worker_killed_and_replaced(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    stuck = load_circuit(write(tmp_path, "stuck.cir", DIVIDER))
    divider = load_circuit(write(tmp_path, "divider.cir", DIVIDER))
    monkeypatch.setenv(TEST_FAULT_ENV, "hang:stuck")  # the worker sleeps, ignoring its timeout
    settings = RunSettings(harmonics=HARMONICS, probe="v(out)",
                           steady=SteadySettings(timeout=0.5))
    with EnginePool(1, kill_grace=1.0) as hanging:
        began = time.monotonic()
        with pytest.raises(SimulationError) as caught:
            run_circuit(stuck, settings=settings, pool=hanging)
        assert time.monotonic() - began < 15.0
        message = str(caught.value)
        assert "\n" not in message and message.startswith("stuck [r2=1000]: ")
        assert "did not finish within 0.5 s" in message and "killed" in message, message
        assert "raise --timeout" in message
        assert_divider(run_circuit(divider, settings=SETTINGS, pool=hanging), r2=1e3)


FAULTS = [
    # (id, netlist, values, settings, words the reason must hold)
    ("timestep-too-small", LATCH_DIVIDER, {"rsw": 1e3}, SETTINGS,
     ("faulty [rsw=1000]: timestep too small at t = ", "s1")),
    ("past-timeout", SLOW_DIVIDER, {},
     RunSettings(harmonics=HARMONICS, probe="v(out)",
                 steady=SteadySettings(tmax=100e-9, timeout=0.5)),
     ("faulty [f0=50]: transient did not finish within 0.5 s", "raise --timeout")),
    ("singular-matrix", SOURCE_LOOP, {}, SETTINGS, ("faulty: ",)),
]


@pytest.mark.parametrize(("netlist", "values", "settings", "words"), [f[1:] for f in FAULTS],
                         ids=[f[0] for f in FAULTS])
def test_run_circuit_engine_failure_then_same_pool_works(
    netlist: str, values: dict, settings: RunSettings, words: tuple[str, ...], pool: EnginePool,
    tmp_path: Path,
) -> None:
    faulty = load_circuit(write(tmp_path, "faulty.cir", netlist))
    began = time.monotonic()
    with pytest.raises(SimulationError) as caught:
        run_circuit(faulty, values=values, settings=settings, pool=pool)
    assert time.monotonic() - began < 20.0
    message = str(caught.value)
    assert "\n" not in message
    for word in words:
        assert word in message, message
    assert caught.value.circuit == "faulty"
    divider = load_circuit(write(tmp_path, "divider.cir", DIVIDER))
    assert_divider(run_circuit(divider, settings=SETTINGS, pool=pool), r2=1e3)


# ------------------------------------------------------------------------------ command line
def test_cli_run_segfaulting_worker_one_line_exit_2(tmp_path: Path) -> None:
    proc = simloop("run", "half-wave", "--harmonics", "2", "--json", "r.json", cwd=tmp_path,
                   fault="segv:half-wave")
    line = one_error_line(proc)
    assert line.startswith("simloop run: error: half-wave [")
    assert "the engine worker crashed" in line and "SIGSEGV" in line, line
    assert proc.stdout == "" and not (tmp_path / "r.json").exists()


def test_cli_run_timestep_too_small_one_line_exit_2(tmp_path: Path) -> None:
    write(tmp_path, "latch.cir", LATCH_DIVIDER)
    proc = simloop("run", "latch.cir", "--probe", "v(out)", "--harmonics", "2", "--set",
                   "rsw=1k", cwd=tmp_path)
    line = one_error_line(proc)
    assert "latch [rsw=1000]: timestep too small at t = " in line, line
    assert "smooth the discontinuity" in line


def test_cli_run_voltage_source_loop_one_line_exit_2(tmp_path: Path) -> None:
    write(tmp_path, "loop.cir", SOURCE_LOOP)
    proc = simloop("run", "loop.cir", "--probe", "v(out)", "--harmonics", "2", cwd=tmp_path)
    line = one_error_line(proc)
    assert line.startswith("simloop run: error: loop: "), line
    assert proc.stdout == ""


def test_cli_run_voltage_source_loop_reason_names_singular_matrix(tmp_path: Path) -> None:
    write(tmp_path, "loop.cir", SOURCE_LOOP)
    proc = simloop("run", "loop.cir", "--probe", "v(out)", "--harmonics", "2", cwd=tmp_path)
    line = one_error_line(proc).lower()
    assert "singular matrix" in line and "vs#branch" in line, line
    assert "loops of voltage sources" in line, line


def test_cli_sweep_timestep_too_small_point_fails_others_stored_and_reused(tmp_path: Path) -> None:
    write(tmp_path, "latch.cir", LATCH_DIVIDER)
    argv = ("sweep", "latch.cir", "--vary", "rsw=1,1k", "--probe", "v(out)", "--harmonics",
            str(HARMONICS), "--store", "s.db", "--json", "s.json", "--workers", "2", "--quiet")
    first = simloop(*argv, cwd=tmp_path)
    line = one_error_line(first)
    assert "1 of 2 points failed" in line, line
    table = first.stdout.splitlines()
    assert re.match(r"\s*0\s+rsw=1\s+ok\b", table[0]), first.stdout
    assert re.match(r"\s*1\s+rsw=1000\s+failed\s+latch \[rsw=1000\]: timestep too small at t = ",
                    table[1]), first.stdout
    assert table[-1] == "2 points: 2 simulated, 0 reused from s.db, 1 failed"
    doc = json.loads((tmp_path / "s.json").read_text(encoding="utf-8"))
    ok, failed = doc["points"]
    assert ok["status"] == "ok" and failed["status"] == "failed"
    assert fundamental_amplitude(ok["harmonics"]) == pytest.approx(1.5 * 1e3 / 2e3, rel=1e-10)
    assert "timestep too small" in failed["error"]
    rows = stored(tmp_path / "s.db")
    assert sorted(status for status, _ in rows.values()) == ["failed", "ok"]
    # The rerun keeps the finished point and tries the failed one again.
    again = simloop(*argv, cwd=tmp_path)
    one_error_line(again)
    assert again.stdout.splitlines()[-1] == "2 points: 1 simulated, 1 reused from s.db, 1 failed"


def test_cli_sweep_point_past_timeout_fails_other_point_finishes(tmp_path: Path) -> None:
    """At TMAX 100 ns, 12 periods of 50 Hz are 2.4 million steps (far past 0.5 s); 50 kHz is
    2400 steps."""
    write(tmp_path, "slow.cir", SLOW_DIVIDER)
    began = time.monotonic()
    proc = simloop("sweep", "slow.cir", "--vary", "f0=50,50k", "--probe", "v(out)",
                   "--harmonics", str(HARMONICS), "--tmax", "100n", "--timeout", "0.5",
                   "--store", "s.db", "--json", "s.json", "--workers", "2", "--quiet",
                   cwd=tmp_path)
    assert time.monotonic() - began < 30.0
    one_error_line(proc)
    doc = json.loads((tmp_path / "s.json").read_text(encoding="utf-8"))
    slow, fast = doc["points"]
    assert slow["status"] == "failed"
    assert "slow [f0=50]: transient did not finish within 0.5 s" in slow["error"], slow["error"]
    assert fast["status"] == "ok"
    # 200 engine points per period: cubic-spline resampling error at most 5/384 (w h)^4 of the
    # amplitude (interpolation error bound of the cubic spline; common practice), 1.3e-8 here.
    assert fundamental_amplitude(fast["harmonics"]) == pytest.approx(0.5, rel=1.3e-8)
    assert sorted(status for status, _ in stored(tmp_path / "s.db").values()) == ["failed", "ok"]


def test_cli_check_segfault_in_one_design_other_design_finishes_and_is_kept(tmp_path: Path) -> None:
    write(tmp_path, "victim.cir", DIVIDER)
    write(tmp_path, "divider.cir", DIVIDER)
    limit = '[settings]\nharmonics = 3\nprobe = "v(out)"\n[[limit]]\nmetric = "h1_v"\nmin = 0.4\nmax = 0.8\n'
    write(tmp_path, "crash.toml", 'circuit = "victim.cir"\n' + limit)
    write(tmp_path, "good.toml", 'circuit = "divider.cir"\n[corners]\nr2 = ["1k", "3k"]\n' + limit)
    proc = simloop("check", "crash.toml", "good.toml", "--store", "c.db", "--json", "c.json",
                   "--workers", "1", "--quiet", cwd=tmp_path, fault="segv:victim")
    assert proc.returncode == 2, (proc.stdout, proc.stderr)
    assert "Traceback" not in proc.stdout + proc.stderr
    doc = json.loads((tmp_path / "c.json").read_text(encoding="utf-8"))
    crash, good = doc["designs"]
    (broken,) = crash["verdicts"]
    assert broken["status"] == "error"
    assert "the engine worker crashed" in broken["reason"] and "SIGSEGV" in broken["reason"]
    assert [v["status"] for v in good["verdicts"]] == ["pass", "pass"]
    values = [v["value"] for v in good["verdicts"]]
    assert values == pytest.approx([1e3 / 2e3, 3e3 / 4e3], rel=1e-10)  # R2 / (R1 + R2)
    # The divider's corners are in the store: a re-check simulates nothing.
    again = simloop("check", "good.toml", "--store", "c.db", "--quiet", cwd=tmp_path)
    assert again.returncode == 0, (again.stdout, again.stderr)
    assert "2 corners (0 simulated, 2 reused from the store)" in again.stdout, again.stdout


# ------------------------------------------------------------------------------ parent killed
def _children(pid: int) -> list[int]:
    """Processes whose parent is ``pid`` (from /proc)."""
    found = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue
        if int(stat.rsplit(")", 1)[1].split()[1]) == pid:
            found.append(int(entry.name))
    return found


def _alive(pid: int) -> bool:
    """True while ``pid`` runs (a zombie waiting to be reaped counts as ended)."""
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


def _cmdline(pid: int) -> str:
    try:
        return Path(f"/proc/{pid}/cmdline").read_bytes().replace(b"\0", b" ").decode()
    except OSError:
        return ""


#: A parent that starts one engine worker, runs one request, says so and waits to be killed.
#: Spawned workers import the parent's main module as ``__mp_main__`` before they reach the
#: pool's initializer; with SLOW_START=1 that import takes 1.5 s (a worker slow to start, as on
#: a loaded machine), a window in which the parent can die first.
POOL_SCRIPT = """
import os
import time

if __name__ == "__mp_main__" and os.environ.get("SLOW_START") == "1":
    time.sleep(1.5)

from simloop.engine import EnginePool, TransientRequest

if __name__ == "__main__":
    pool = EnginePool(1)
    pool.run(TransientRequest("divider\\nV1 in 0 1\\nR1 in out 1k\\nR2 out 0 1k",
                              stop=1e-4, step=1e-6, tmax=1e-6))
    print("ready", flush=True)
    time.sleep(120)
"""


def _kill_parent_then_watch_worker(tmp_path: Path, *, when: str) -> None:
    """Start POOL_SCRIPT, SIGKILL it (``when`` = "starting": while its worker is still
    starting; "idle": after the run, its worker waiting for work), and require the worker to
    end within 5 s."""
    script = write(tmp_path, "pool_script.py", POOL_SCRIPT)
    env = dict(os.environ, SLOW_START="1" if when == "starting" else "0")
    env.setdefault("NGSPICE_LIBRARY_PATH", "libngspice.so.0")
    env.pop(TEST_FAULT_ENV, None)
    proc = subprocess.Popen([sys.executable, str(script)], cwd=tmp_path, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
    started: list[int] = []  # every child of that process: ours to clean up
    try:
        if when == "idle":
            assert proc.stdout is not None and proc.stdout.readline().strip() == "ready"
        workers: list[int] = []
        deadline = time.monotonic() + 30.0
        while not workers and time.monotonic() < deadline:
            started = sorted(set(started) | set(_children(proc.pid)))
            workers = [pid for pid in started if "spawn_main" in _cmdline(pid)]
            time.sleep(0.01)
        assert len(workers) == 1, [_cmdline(pid) for pid in started]
        if when == "starting":
            time.sleep(0.3)  # the parent has handed over the start-up data; the worker sleeps
        proc.kill()
        proc.wait()
        deadline = time.monotonic() + 5.0
        while time.monotonic() < deadline and _alive(workers[0]):
            time.sleep(0.1)
        assert not _alive(workers[0]), "the engine worker outlived its killed parent"
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        if proc.stdout is not None:
            proc.stdout.close()
        for pid in started:
            if _alive(pid):
                os.kill(pid, signal.SIGKILL)


@pytest.mark.skipif(not Path("/proc/self/stat").is_file(), reason="needs Linux /proc")
def test_engine_pool_killed_parent_leaves_no_idle_worker(tmp_path: Path) -> None:
    """SIGKILL (a CI job timeout, the OOM killer) leaves no engine worker behind."""
    _kill_parent_then_watch_worker(tmp_path, when="idle")


@pytest.mark.skipif(not Path("/proc/self/stat").is_file(), reason="needs Linux /proc")
def test_engine_pool_parent_killed_while_worker_starts_leaves_no_worker(tmp_path: Path) -> None:
    _kill_parent_then_watch_worker(tmp_path, when="starting")
