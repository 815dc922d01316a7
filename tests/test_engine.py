"""Tests of simloop.engine: real ngspice transients in spawned workers.

Every test runs the real engine (ngspice 39 through PySpice): no mocks. The accuracy checks compare
with closed-form circuit results written here from first principles; the failure checks build
circuits that really make ngspice fail, crash or hang a real worker, and then check that the next
request in the same pool succeeds.
"""

from __future__ import annotations

import cmath
import json
import math
import os
import re
import shutil
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest

from simloop.engine import (
    TEST_FAULT_ENV,
    EnginePool,
    TransientRequest,
    engine_available,
    engine_version,
    run_transient,
    transient_deck,
)
from simloop.errors import InputError, SimulationError

pytestmark = pytest.mark.engine

# First-order RC low-pass driven at f with omega*R*C = 2 (corner at f/2).
R_OHM = 1e3
F_HZ = 1e3
OMEGA = 2.0 * math.pi * F_HZ
C_FARAD = 2.0 / (OMEGA * R_OHM)
RC_NETLIST = (
    "rc low-pass\n"
    f"V1 in 0 SIN(0 1 {F_HZ!r})\n"
    f"R1 in out {R_OHM!r}\n"
    f"C1 out 0 {C_FARAD!r}\n"
)
DIVIDER = "divider\nV1 in 0 1\nR1 in out 1k\nR2 out 0 1k\n"

# A voltage-controlled switch that controls itself, with no capacitance at its node: once the
# supply ramps past the switch's on-threshold the node must jump between two states in zero time,
# so ngspice gives up with "Timestep too small". The supply starts its 10 ns ramp at 2 us.
SELF_SWITCH = (
    "self-switching node\n"
    "V1 vdd 0 PULSE(0 1 2u 10n 10n 1 2)\n"
    "R1 vdd a 1k\n"
    "S1 a 0 a 0 sw\n"
    ".model sw SW(VT=0.5 VH=0.1 RON=1 ROFF=1meg)\n"
)


def _rc_request(tmax: float, *, stop: float = 10e-3, **extra) -> TransientRequest:
    return TransientRequest(RC_NETLIST, stop=stop, step=tmax, tmax=tmax, circuit="rc", **extra)


def _sine_fit(t: np.ndarray, v: np.ndarray) -> tuple[float, float]:
    """Least-squares v = c0 + a sin(wt + phi) over the given samples: (a, phi)."""
    basis = np.column_stack([np.ones_like(t), np.cos(OMEGA * t), np.sin(OMEGA * t)])
    (c0, c_cos, c_sin), *_ = np.linalg.lstsq(basis, v, rcond=None)
    return math.hypot(c_cos, c_sin), math.atan2(c_cos, c_sin)


def _rss_bytes(pid: int) -> int:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) * 1024
    raise AssertionError(f"no VmRSS for pid {pid}")


@pytest.fixture(scope="module")
def pool():
    with EnginePool(1) as shared:
        yield shared


# --- accuracy ---------------------------------------------------------------------------------


def test_run_transient_rc_lowpass_amplitude_and_phase(pool: EnginePool) -> None:
    tmax = 1e-6
    trace = pool.run(_rc_request(tmax))
    steady = trace.time >= 8e-3  # 25 time constants after the start: transient below 1e-10
    amplitude, phase = _sine_fit(trace.time[steady], trace.vectors["out"][steady])
    wrc = OMEGA * R_OHM * C_FARAD
    # First-order RC low-pass: |H| = 1/sqrt(1 + (wRC)^2), arg H = -atan(wRC) (common practice).
    # The trapezoidal rule's frequency warping bounds the relative error by (w TMAX)^2 / 12
    # (common practice), 3.3e-6 here.
    bound = (OMEGA * tmax) ** 2 / 12.0
    assert amplitude == pytest.approx(1.0 / math.sqrt(1.0 + wrc**2), rel=bound, abs=0.0)
    assert phase == pytest.approx(-math.atan(wrc), rel=0.0, abs=bound)


@pytest.mark.parametrize("tmax", [1e-6, 2e-6])
def test_run_transient_rc_error_is_trapezoidal_warping(pool: EnginePool, tmax: float) -> None:
    # The trapezoidal rule is the bilinear map s = (2/h)(z - 1)/(z + 1): a sine at w is integrated
    # as if it were at w_d = (2/h) tan(w h / 2) (common practice). With h = TMAX in steady state the
    # engine's amplitude and phase must be the exact response at w_d, so the error against the
    # continuous |H| is predicted, including its TMAX^2 growth.
    trace = pool.run(_rc_request(tmax))
    steady = trace.time >= 8e-3
    amplitude, phase = _sine_fit(trace.time[steady], trace.vectors["out"][steady])
    warped = (2.0 / tmax) * math.tan(OMEGA * tmax / 2.0) * R_OHM * C_FARAD
    # Remaining transient exp(-8 ms / RC) = 1.4e-11 sets the tolerance.
    assert amplitude == pytest.approx(1.0 / math.sqrt(1.0 + warped**2), rel=1e-9, abs=0.0)
    assert phase == pytest.approx(-math.atan(warped), rel=0.0, abs=1e-9)


# --- what comes back --------------------------------------------------------------------------


def test_engine_version_looks_like_ngspice(pool: EnginePool) -> None:
    version = engine_version(pool=pool)
    match = re.fullmatch(r"ngspice-(\d+)", version)
    assert match is not None, version
    trace = pool.run(TransientRequest(DIVIDER, stop=1e-4, step=1e-6, tmax=1e-6))
    assert trace.engine_version == version
    dpkg = shutil.which("dpkg-query")
    if dpkg is not None:  # Debian's package version of the library must name the same release
        package = subprocess.run(
            [dpkg, "-W", "-f", "${Version}", "libngspice0"], capture_output=True, text=True
        )
        if package.returncode == 0 and package.stdout:
            assert package.stdout.split(".")[0].split(":")[-1] == match.group(1)


def test_engine_available_reports_version() -> None:
    ok, reason = engine_available()
    assert ok, reason
    assert re.fullmatch(r"ngspice-\d+", reason)


def test_run_transient_default_pool_divider() -> None:
    trace = run_transient(TransientRequest(DIVIDER, stop=1e-4, step=1e-6, tmax=1e-6))
    # Resistive divider of two equal resistors: half the supply (common practice).
    np.testing.assert_allclose(trace.vectors["out"], 0.5, rtol=1e-12)
    np.testing.assert_allclose(trace.vectors["v1#branch"], -0.5e-3, rtol=1e-12)


def test_run_transient_save_all_and_subset(pool: EnginePool) -> None:
    full = pool.run(_rc_request(1e-5, stop=1e-3))
    assert set(full.vectors) == {"in", "out", "v1#branch"}
    assert full.points == full.time.size == full.vectors["out"].size
    assert full.time.dtype == np.float64 and full.vectors["out"].dtype == np.float64
    assert not full.time.flags.writeable
    assert np.all(np.diff(full.time) > 0)
    assert full.time[-1] == pytest.approx(1e-3, rel=1e-12)
    subset = pool.run(_rc_request(1e-5, stop=1e-3, save=("v(out)",)))
    assert "out" in subset.vectors and "in" not in subset.vectors
    assert subset.time.size == subset.vectors["out"].size == subset.points
    currents = pool.run(_rc_request(1e-5, stop=1e-3, save=("i(v1)", "v(in,out)")))
    assert {"v1#branch", "in", "out"} <= set(currents.vectors)
    # The source current is -(v(in) - v(out)) / R: the branch current flows into the + terminal.
    np.testing.assert_allclose(
        currents.vectors["v1#branch"],
        -(currents.vectors["in"] - currents.vectors["out"]) / R_OHM,
        rtol=0.0,
        atol=1e-12,
    )


def test_run_transient_uic_drops_time_zero(pool: EnginePool) -> None:
    plain = pool.run(_rc_request(1e-5, stop=1e-3))
    uic = pool.run(_rc_request(1e-5, stop=1e-3, uic=True))
    assert plain.time[0] == 0.0
    assert uic.time[0] > 0.0  # observed with ngspice 39: first point at TSTEP / 100
    late = pool.run(_rc_request(1e-5, stop=1e-3, start=5e-4))
    assert late.time[0] >= 5e-4 - 1e-15


def test_transient_deck_cards() -> None:
    request = _rc_request(1e-6, options=(("reltol", "1e-4"), ("noinit", "")), save=("v(out)",),
                          uic=True, start=1e-3)
    tail = transient_deck(request).splitlines()[-4:]
    assert tail == [
        ".options reltol=1e-4 noinit",
        ".save v(out)",
        ".tran 1e-06 0.01 0.001 1e-06 uic",
        ".end",
    ]


def test_run_transient_options_reach_engine(pool: EnginePool) -> None:
    # .options method=gear makes ngspice integrate with BDF2, s = (3/2 - 2 z^-1 + 1/2 z^-2) / h
    # (common practice), instead of the trapezoidal rule: the steady-state response must be the
    # exact BDF2 response at h = TMAX, which differs from the trapezoidal one by about 3e-5.
    tmax = 2e-6
    trace = pool.run(_rc_request(tmax, options=(("method", "gear"),)))
    steady = trace.time >= 8e-3
    amplitude, phase = _sine_fit(trace.time[steady], trace.vectors["out"][steady])
    z = cmath.exp(1j * OMEGA * tmax)
    bdf2 = 1.0 / (1.0 + (1.5 - 2.0 / z + 0.5 / z**2) / tmax * R_OHM * C_FARAD)
    assert amplitude == pytest.approx(abs(bdf2), rel=1e-9, abs=0.0)
    assert phase == pytest.approx(cmath.phase(bdf2), rel=0.0, abs=1e-9)
    warped = (2.0 / tmax) * math.tan(OMEGA * tmax / 2.0) * R_OHM * C_FARAD
    assert abs(amplitude * math.sqrt(1.0 + warped**2) - 1.0) > 1e-5  # not the trapezoidal answer


# --- engine errors ----------------------------------------------------------------------------


def test_run_transient_timestep_too_small(pool: EnginePool) -> None:
    request = TransientRequest(
        SELF_SWITCH, stop=10e-6, step=1e-9, tmax=1e-9, circuit="self-switch",
        parameters=(("R1", 1e3),),
    )
    with pytest.raises(SimulationError, match="timestep too small at t = ") as caught:
        pool.run(request)
    error = caught.value
    assert error.circuit == "self-switch" and error.parameters == {"R1": 1e3}
    assert "self-switch [R1=1000]" in str(error)
    assert "Timestep too small" in error.engine_message and "s1" in error.engine_message
    assert "\n" not in str(error)
    # ngspice's switch turns on when its control voltage exceeds VT + VH = 0.6 V (ngspice manual,
    # "Switches"; common practice). While off, v(a) = v(vdd) ROFF/(R1 + ROFF), and v(vdd) ramps
    # 0 -> 1 V in 10 ns from 2 us: the engine must stop at that crossing, to its 1 ns step.
    stopped = float(re.search(r"at t = ([0-9.eE+-]+) s", str(error)).group(1))
    crossing = 2e-6 + 10e-9 * 0.6 * (1e6 + 1e3) / 1e6
    assert stopped == pytest.approx(crossing, rel=0.0, abs=1e-9)
    assert pool.run(TransientRequest(DIVIDER, stop=1e-4, step=1e-6, tmax=1e-6)).points > 0


def test_run_transient_voltage_loop_fails_at_start(pool: EnginePool) -> None:
    loop = "loop\nV1 in 0 1\nV2 in 0 2\nR1 in 0 1k\n"
    with pytest.raises(SimulationError, match="initial time point"):
        pool.run(TransientRequest(loop, stop=1e-4, step=1e-6, tmax=1e-6, circuit="loop"))


@pytest.mark.parametrize(
    ("device", "engine_words"),
    [
        ("D1 in out nosuch", "could not find a valid modelname"),
        ("X1 in out nosub", "unknown subckt"),
        ("R1 in out {rx}", "Undefined parameter"),
    ],
    ids=["undefined-model", "unknown-subcircuit", "undefined-parameter"],
)
def test_run_transient_load_error(pool: EnginePool, device: str, engine_words: str) -> None:
    netlist = f"broken\nV1 in 0 1\n{device}\nR2 out 0 1k\n"
    request = TransientRequest(netlist, stop=1e-4, step=1e-6, tmax=1e-6, circuit="broken")
    with pytest.raises(SimulationError, match="could not load the netlist") as caught:
        pool.run(request)
    assert engine_words in caught.value.engine_message
    assert engine_words in str(caught.value)
    # The next request succeeds, also after "ngspice cannot recover" (the worker is replaced).
    trace = pool.run(TransientRequest(DIVIDER, stop=1e-4, step=1e-6, tmax=1e-6))
    np.testing.assert_allclose(trace.vectors["out"], 0.5, rtol=1e-12)


def test_run_transient_missing_vector(pool: EnginePool) -> None:
    with pytest.raises(SimulationError, match=r"no such vector v\(nonode\)"):
        pool.run(_rc_request(1e-5, stop=1e-4, save=("v(out)", "v(nonode)")))


def test_run_transient_timeout(pool: EnginePool) -> None:
    slow = _rc_request(1e-9, stop=10.0, timeout=0.5)
    began = time.monotonic()
    with pytest.raises(SimulationError, match=r"rc: transient did not finish within 0.5 s"):
        pool.run(slow)
    assert time.monotonic() - began < 5.0
    trace = pool.run(_rc_request(1e-5, stop=1e-3))
    assert trace.time[-1] == pytest.approx(1e-3, rel=1e-12)


# --- workers ----------------------------------------------------------------------------------


def test_engine_pool_crashed_worker_replaced(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv(TEST_FAULT_ENV, "segv:crash-me")  # read by the workers spawned below
    with EnginePool(1) as crashing:
        assert crashing.run(TransientRequest(DIVIDER, stop=1e-4, step=1e-6, tmax=1e-6)).points
        doomed = TransientRequest(DIVIDER, stop=1e-4, step=1e-6, tmax=1e-6, circuit="crash-me")
        crashed = r"crash-me: the engine worker crashed \(.*SIGSEGV"
        with pytest.raises(SimulationError, match=crashed):
            crashing.run(doomed)
        trace = crashing.run(TransientRequest(DIVIDER, stop=1e-4, step=1e-6, tmax=1e-6))
        np.testing.assert_allclose(trace.vectors["out"], 0.5, rtol=1e-12)


def test_engine_pool_hung_worker_killed(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv(TEST_FAULT_ENV, "hang:stuck")  # the worker ignores its timeout
    with EnginePool(1, kill_grace=1.0) as hanging:
        stuck = TransientRequest(DIVIDER, stop=1e-4, step=1e-6, tmax=1e-6, timeout=0.5,
                                 circuit="stuck")
        began = time.monotonic()
        with pytest.raises(SimulationError, match="stuck: .*did not respond to halt"):
            hanging.run(stuck)
        assert time.monotonic() - began < 10.0
        trace = hanging.run(TransientRequest(DIVIDER, stop=1e-4, step=1e-6, tmax=1e-6))
        np.testing.assert_allclose(trace.vectors["out"], 0.5, rtol=1e-12)


def test_engine_pool_two_workers_run_concurrently() -> None:
    with EnginePool(2) as pair:
        warm = [pair.submit(_rc_request(1e-5, stop=1e-3)) for _ in range(2)]
        for future in warm:
            future.result()
        workers = set(pair._current.processes)  # test-only look inside: two live workers
        began = time.monotonic()
        futures = [pair.submit(_rc_request(1e-6, stop=0.05)) for _ in range(2)]
        traces = [future.result() for future in futures]
        elapsed = time.monotonic() - began
    busy = sum(trace.wall_time for trace in traces)
    # Figures only: tests never assert wall-clock times (bench/ measures throughput).
    print(f"\n2 workers: {elapsed:.3f} s wall for {busy:.3f} s of engine time")
    assert len(workers) == 2
    for trace in traces:
        assert trace.time[-1] == pytest.approx(0.05, rel=1e-12)


def test_engine_pool_memory_stays_flat() -> None:
    request = _rc_request(1e-6, stop=1e-3)
    with EnginePool(1, max_tasks_per_child=1000) as single:
        started = time.monotonic()
        single.run(request)
        startup = time.monotonic() - started
        for _ in range(9):
            single.run(request)
        (pid,) = single._current.processes  # the one worker (test-only look inside)
        before = _rss_bytes(pid)
        walls, works = [], []
        for _ in range(200):
            began = time.monotonic()
            trace = single.run(request)
            walls.append(time.monotonic() - began)
            works.append(trace.wall_time)
        after = _rss_bytes(pid)
        assert tuple(single._current.processes) == (pid,)
    growth = (after - before) / 2**20
    print(
        f"\nstart-up to first result {startup:.3f} s; per run: wall "
        f"{np.median(walls) * 1e3:.2f} ms, "
        f"worker {np.median(works) * 1e3:.2f} ms ({trace.points} points); RSS {before / 2**20:.1f} "
        f"-> {after / 2**20:.1f} MiB over 200 runs ({growth:+.1f} MiB)"
    )
    assert growth < 100.0


def test_engine_pool_prints_nothing(capfd: pytest.CaptureFixture[str]) -> None:
    with EnginePool(1) as quiet:  # spawned inside the test: its workers inherit the capture
        quiet.run(TransientRequest(DIVIDER, stop=1e-4, step=1e-6, tmax=1e-6))
        for netlist in (SELF_SWITCH, "bad\nV1 in 0 1\nR1 in out {rx}\nR2 out 0 1k\n"):
            with pytest.raises(SimulationError):
                quiet.run(TransientRequest(netlist, stop=1e-5, step=1e-9, tmax=1e-9))
        quiet.run(TransientRequest(DIVIDER, stop=1e-4, step=1e-6, tmax=1e-6))
    out, err = capfd.readouterr()
    assert (out, err) == ("", "")


# --- .spiceinit -------------------------------------------------------------------------------

_PLAIN_NGSPICE = (
    "import logging, os; logging.disable(logging.CRITICAL); "
    "os.environ.setdefault('NGSPICE_LIBRARY_PATH', 'libngspice.so.0'); "
    "from PySpice.Spice.NgSpice.Shared import NgSpiceShared; NgSpiceShared.new_instance()"
)


def _write_spiceinit(folder: Path, marker: Path) -> None:
    (folder / ".spiceinit").write_text(f"shell touch {marker}\n", encoding="ascii")


def test_engine_pool_ignores_spiceinit_in_cwd(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    marker = tmp_path / "sourced"
    _write_spiceinit(tmp_path, marker)
    # Control: ngspice started the plain way in that folder runs the file.
    subprocess.run([sys.executable, "-c", _PLAIN_NGSPICE], cwd=tmp_path, capture_output=True,
                   check=True, timeout=60)
    assert marker.exists(), "control failed: ngspice did not source ./.spiceinit"
    marker.unlink()
    monkeypatch.chdir(tmp_path)
    with EnginePool(1) as isolated:
        isolated.run(TransientRequest(DIVIDER, stop=1e-4, step=1e-6, tmax=1e-6))
    assert not marker.exists()


_HOME_PROBE = textwrap.dedent(
    """
    import json, os, pwd, subprocess, sys, tempfile
    from simloop.engine import EnginePool, TransientRequest

    if __name__ == "__main__":
        marker = sys.argv[1]
        home = pwd.getpwuid(os.getuid()).pw_dir
        with open(os.path.join(home, ".spiceinit"), "w") as fh:  # lands in the overlay only
            fh.write(f"shell touch {marker}\\n")
        empty = tempfile.mkdtemp()
        subprocess.run([sys.executable, "-c", sys.argv[2]], cwd=empty, capture_output=True,
                       env=dict(os.environ, HOME=empty), timeout=60, check=True)
        control = os.path.exists(marker)
        if control:
            os.remove(marker)
        with EnginePool(1) as pool:
            pool.run(TransientRequest("d\\nV1 a 0 1\\nR1 a 0 1k", stop=1e-4, step=1e-6,
                                      tmax=1e-6))
        print(json.dumps({"control": control, "pool": os.path.exists(marker)}))
    """
)


def test_engine_pool_ignores_spiceinit_in_user_home(tmp_path: Path) -> None:
    # ngspice 39 reads ~/.spiceinit from the password database's home folder, not from $HOME.
    # The user's real home is left untouched: a private mount namespace lays an overlay on it.
    import pwd

    if os.geteuid() != 0 or shutil.which("unshare") is None:
        pytest.skip("needs root and unshare(1) to overlay the home folder in a mount namespace")
    home = pwd.getpwuid(os.getuid()).pw_dir
    had_one = (Path(home) / ".spiceinit").exists()
    upper, work = tmp_path / "upper", tmp_path / "work"
    upper.mkdir()
    work.mkdir()
    script = tmp_path / "probe.py"
    script.write_text(_HOME_PROBE, encoding="utf-8")
    marker = tmp_path / "sourced"
    shell = (
        f"mount -t overlay overlay -o lowerdir={home},upperdir={upper},workdir={work} {home} "
        f"|| exit 97; exec {sys.executable} {script} {marker} \"$1\""
    )
    result = subprocess.run(
        ["unshare", "-m", "--propagation", "private", "sh", "-c", shell, "sh", _PLAIN_NGSPICE],
        cwd=tmp_path, capture_output=True, text=True, timeout=120,
    )
    if result.returncode == 97 or "unshare failed" in result.stderr:
        pytest.skip(f"cannot overlay the home folder here: {result.stderr.strip()}")
    assert result.returncode == 0, result.stderr
    seen = json.loads(result.stdout.strip().splitlines()[-1])
    assert seen == {"control": True, "pool": False}
    assert (Path(home) / ".spiceinit").exists() == had_one  # the real home folder is untouched


# --- request validation -----------------------------------------------------------------------


@pytest.mark.parametrize(
    ("changes", "message"),
    [
        ({"stop": 0.0}, "stop time"),
        ({"tmax": float("nan")}, "TMAX"),
        ({"start": 2e-3, "stop": 1e-3}, "0 <= start < stop"),
        ({"netlist": "\nV1 in 0 1"}, "first line is its title"),
        ({"netlist": "t\nV1 in 0 1\n.tran 1u 1m"}, "line 3 holds .tran"),
        ({"netlist": "t\nV1 in 0 1\n.control\nshell ls\n.endc"}, r"line 3 holds \.control"),
        ({"netlist": "t\nV1 in 0 1\n.END"}, r"holds \.END"),
        ({"save": ("v(out); shell ls",)}, "save expression"),
        ({"options": (("reltol", "1e-4 2"),)}, "option"),
        ({"parameters": (("R1", "big"),)}, "parameters"),
    ],
)
def test_transient_request_refuses(changes: dict, message: str) -> None:
    fields = {"netlist": DIVIDER, "stop": 1e-3, "step": 1e-6, "tmax": 1e-6} | changes
    with pytest.raises(InputError, match=message):
        TransientRequest(**fields)
