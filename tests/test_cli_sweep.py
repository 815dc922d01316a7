"""End-to-end tests of ``simloop sweep``: the installed console script driving the real engine.

Refusals (bad ``--vary`` specs, unknown names, oversized grids, unwritable stores) need no engine:
each must give one line on stderr and exit code 2, without a traceback. The engine runs use the
1 kHz accuracy circuits of tests/data/circuits/ (about 0.1-0.5 s a point); the numbers a sweep
writes are checked against the independent reference of tests/reference/ (first principles:
Shockley junction solved point by point, shooting with scipy ``solve_ivp`` for the capacitor).
"""

from __future__ import annotations

import csv
import json
import math
import os
import signal
import sqlite3
import subprocess
import time
from pathlib import Path

import numpy as np
import pytest

from reference import rectifiers as ref
from cli_support import SIMLOOP
from cli_support import assert_one_line_error as shared_one_line_error

#: The console script installed with simloop (``[project.scripts]`` in pyproject.toml).
CIRCUITS = Path(__file__).parent / "data" / "circuits"
RESISTIVE = CIRCUITS / "half-wave-resistive.cir"
RESERVOIR = CIRCUITS / "half-wave-reservoir.cir"
TARGET = 1e-5  # issue "circuit in the loop": |A_n - A_n(exact)| <= 1e-5 of the largest, n <= 10
DIODE = dict(is_=2.5e-9, n=1.75, rser=0.5)  # the .model dt of tests/data/circuits/*.cir
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), sec. 5.2 (common practice)
ANALYSIS = ("--probe", "v(out)", "--ideal", "half-wave", "--quiet")
FAULT_ENV = "SIMLOOP_TEST_FAULT"  # the engine's test hook (simloop/engine.py docstring)


def _env(**extra: str) -> dict[str, str]:
    env = dict(os.environ, MPLBACKEND="Agg")
    env.setdefault("NGSPICE_LIBRARY_PATH", "libngspice.so.0")
    env.pop(FAULT_ENV, None)
    env.update(extra)
    return env


def simloop(*args: str, cwd: Path, timeout: float = 180.0, **env: str) -> subprocess.CompletedProcess[str]:
    """Run the real console script; output captured as text."""
    if not SIMLOOP.is_file():
        pytest.fail(f"console script {SIMLOOP} is missing; install simloop: pip install -e .",
                    pytrace=False)
    return subprocess.run([str(SIMLOOP), *args], cwd=cwd, env=_env(**env), capture_output=True,
                          text=True, timeout=timeout, check=False)


def assert_one_line_error(proc: subprocess.CompletedProcess[str]) -> str:
    """Exit code 2, one stderr line from the sweep command, no traceback (cli_support)."""
    return shared_one_line_error(proc, prefix="simloop sweep: error: ")

def _complex(rows) -> np.ndarray:
    """sim_v, sim_phase_deg rows -> A_n exp(-j psi_n) (f = A0 + sum A_n cos(n w t - psi_n))."""
    return np.array([r["sim_v"] * np.exp(-1j * math.radians(r["sim_phase_deg"])) for r in rows])


def _resistive_reference(vm: float, rl: float) -> np.ndarray:
    p = dict(vm=vm, freq=1e3, rs=2.0, rl=rl, **DIODE)
    a0, amp, ph = ref.fourier_amplitudes(lambda t: ref.half_wave_resistive(t, **p)[0], freq=1e3,
                                         harmonics=10, breakpoints=ref.resistive_breakpoints(**p))
    c = np.asarray(amp) * np.exp(-1j * np.asarray(ph))
    c[0] = a0
    return c


def _read_csv(path: Path) -> list[dict[str, str]]:
    with path.open(newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


# ================================================================================= refusals
@pytest.mark.parametrize(
    ("spec", "words"),
    [
        ("rload=", "write NAME=LIST"),
        ("rload=1k:2k", "a range is START:STOP:COUNT"),
        ("rload=1k:2k:0", "COUNT must be at least 1"),
        ("rload=-1:1:3:log", "log range needs START and STOP > 0"),
        ("rload=a,b", "'a' is not a number"),
        ("rload=1k,1k", "listed twice"),
        ("nosuch=1,2", "no parameter or choice 'nosuch'"),
        ("diode=sl_nosuch", "'sl_nosuch' is not an allowed model"),
    ],
)
def test_sweep_cli_bad_spec_refused(tmp_path, spec, words):
    proc = simloop("sweep", "half-wave", "--vary", spec, "--store", "s.db", cwd=tmp_path)
    assert words in assert_one_line_error(proc)
    assert not (tmp_path / "s.db").exists()  # refused before anything was opened


def test_sweep_cli_unknown_parameter_refused(tmp_path):
    proc = simloop("sweep", "half-wave", "--vary", "rload=10,100", "--set", "nosuch=3",
                   "--store", "s.db", cwd=tmp_path)
    assert "no parameter or choice 'nosuch'" in assert_one_line_error(proc)


def test_sweep_cli_grid_over_limit_refused(tmp_path):
    proc = simloop("sweep", "half-wave", "--vary", "vpk=1:20:20", "--vary", "rload=10:1k:20",
                   "--vary", "rsrc=0.1:2:20", "--store", "s.db", cwd=tmp_path)
    line = assert_one_line_error(proc)
    assert "8000 points, over the limit of 1000" in line and "--max-points" in line
    proc = simloop("sweep", "half-wave", "--vary", "vpk=1:20:20", "--vary", "rload=10:1k:20",
                   "--max-points", "399", "--store", "s.db", cwd=tmp_path)
    assert "400 points, over the limit of 399" in assert_one_line_error(proc)


def test_sweep_cli_unwritable_store_refused(tmp_path):
    blocker = tmp_path / "plain-file"
    blocker.write_text("a file where a folder should be\n")
    proc = simloop("sweep", str(RESISTIVE), "--vary", "rl=100,1k", "--store",
                   str(blocker / "s.db"), *ANALYSIS, cwd=tmp_path)
    assert "cannot open the result store" in assert_one_line_error(proc)


def test_sweep_cli_bad_workers_environment_refused(tmp_path):
    proc = simloop("sweep", "half-wave", "--vary", "rload=10,100", "--store", "s.db",
                   cwd=tmp_path, SIMLOOP_WORKERS="two")
    assert "SIMLOOP_WORKERS" in assert_one_line_error(proc)


def test_sweep_cli_plot_order_above_harmonics_refused(tmp_path):
    proc = simloop("sweep", str(RESISTIVE), "--vary", "rl=100,1k", "--harmonics", "4",
                   "--plot-harmonics", "1,5", "--store", "s.db", cwd=tmp_path)
    assert "raise --harmonics" in assert_one_line_error(proc)


# ============================================================================== good sweeps
@pytest.mark.engine
def test_sweep_cli_outputs_match_reference_and_rerun_reuses(tmp_path):
    args = ("sweep", str(RESISTIVE), "--vary", "rl=100,1k", "--vary", "vm=5,20", *ANALYSIS,
            "--workers", "2", "--store", "s.db")
    proc = simloop(*args, "--json", "a.json", "--csv", "a.csv", "--plot", "a.png", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "4 points: 4 simulated, 0 reused" in proc.stdout
    doc = json.loads((tmp_path / "a.json").read_text())
    assert (doc["simulated"], doc["reused"], doc["failed"]) == (4, 0, 0)
    expected_grid = [(100.0, 5.0), (100.0, 20.0), (1e3, 5.0), (1e3, 20.0)]  # first --vary outermost
    worst = []
    for point, (rl, vm) in zip(doc["points"], expected_grid):
        assert point["status"] == "ok" and point["varied"] == {"rl": rl, "vm": vm}
        c = _resistive_reference(vm, rl)
        worst.append(float(np.max(np.abs(_complex(point["harmonics"]) - c)) / np.max(np.abs(c))))
    print("CLI sweep, worst error per point:", " ".join(f"{e:.1e}" for e in worst))
    assert max(worst) <= TARGET
    # CSV: one row per point and harmonic, numbers written so that float() gives them back
    rows = _read_csv(tmp_path / "a.csv")
    assert len(rows) == 4 * 11
    for row in rows:
        point = doc["points"][int(row["point"])]
        harmonic = point["harmonics"][int(row["n"])]
        assert float(row["sim_v"]) == harmonic["sim_v"]
        assert float(row["sim_phase_deg"]) == harmonic["sim_phase_deg"]
        assert float(row["rl"]) == point["varied"]["rl"] and row["status"] == "ok"
    assert (tmp_path / "a.png").read_bytes()[:8] == PNG_SIGNATURE
    # the store, read with plain SQL
    db = sqlite3.connect(f"file:{tmp_path / 's.db'}?mode=ro", uri=True)
    try:
        counts = db.execute("SELECT COUNT(*), (SELECT COUNT(*) FROM harmonics) FROM points").fetchone()
    finally:
        db.close()
    assert counts == (4, 44)
    # rerun: every point from the store, the same numbers
    again = simloop(*args, "--json", "b.json", cwd=tmp_path)
    assert again.returncode == 0, again.stderr
    assert "4 points: 0 simulated, 4 reused" in again.stdout
    second = json.loads((tmp_path / "b.json").read_text())
    assert (second["simulated"], second["reused"]) == (0, 4)
    assert [p["harmonics"] for p in second["points"]] == [p["harmonics"] for p in doc["points"]]


@pytest.mark.engine
def test_sweep_cli_unconverged_exit_2_outputs_written(tmp_path):
    # 12 periods (the first attempt, --max-periods' floor) cannot bring the change still to
    # come under 1e-15; each point is kept and marked, and the sweep exits 2.
    proc = simloop("sweep", str(RESISTIVE), "--vary", "rl=100,1k", *ANALYSIS, "--max-periods",
                   "12", "--tolerance", "1e-15", "--json", "u.json", "--csv", "u.csv", cwd=tmp_path)
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stdout + proc.stderr
    assert "2 of 2 points failed or did not converge" in proc.stderr
    assert (tmp_path / "u.db").is_file()  # default store: beside --json
    doc = json.loads((tmp_path / "u.json").read_text())
    assert [p["status"] for p in doc["points"]] == ["unconverged"] * 2
    for point in doc["points"]:
        assert "no periodic steady state within 12 periods" in point["error"]
        assert len(point["harmonics"]) == 11
    rows = _read_csv(tmp_path / "u.csv")
    assert len(rows) == 22 and {r["status"] for r in rows} == {"unconverged"}
    assert proc.stdout.count("unconverged") == 2


@pytest.mark.engine
def test_sweep_cli_timed_out_point_failed_others_complete(tmp_path):
    # With TMAX fixed at 1 us, a 10 Hz point needs 1.2 million steps for its first 12 periods
    # (about 5 s here), a 1 kHz point 12 000: a 1 s timeout fails only the first.
    proc = simloop("sweep", str(RESISTIVE), "--vary", "f=10,1k", *ANALYSIS, "--tmax", "1u",
                   "--timeout", "1", "--workers", "2", "--json", "t.json", "--csv", "t.csv",
                   "--store", "t.db", cwd=tmp_path)
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stdout + proc.stderr
    assert "1 of 2 points failed" in proc.stderr
    doc = json.loads((tmp_path / "t.json").read_text())
    slow, fast = doc["points"]
    assert slow["status"] == "failed" and "did not finish within 1 s" in slow["error"]
    assert "raise --timeout" in slow["error"] and slow["harmonics"] is None
    assert fast["status"] == "ok" and len(fast["harmonics"]) == 11
    rows = _read_csv(tmp_path / "t.csv")
    failed = [r for r in rows if r["status"] == "failed"]
    assert len(failed) == 1 and "did not finish" in failed[0]["error"] and failed[0]["sim_v"] == ""
    assert len(rows) == 1 + 11


@pytest.mark.engine
def test_sweep_cli_crashed_worker_recorded(tmp_path):
    # Every request of this circuit crashes its worker (the engine's test hook): the sweep
    # records each point as failed with the crash as its reason, writes its outputs, exits 2.
    netlist = tmp_path / "cli-crash-target.cir"
    netlist.write_text(RESISTIVE.read_text())
    proc = simloop("sweep", str(netlist), "--vary", "rl=100,1k", *ANALYSIS, "--workers", "1",
                   "--json", "c.json", "--store", "c.db", cwd=tmp_path,
                   **{FAULT_ENV: "segv:cli-crash-target"})
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stdout + proc.stderr
    doc = json.loads((tmp_path / "c.json").read_text())
    assert [p["status"] for p in doc["points"]] == ["failed", "failed"]
    for point in doc["points"]:
        assert "the engine worker crashed" in point["error"] and "SIGSEGV" in point["error"]
    assert proc.stdout.count("the engine worker crashed") == 2


# ================================================================================== SIGKILL
KILL_ARGS = ("sweep", str(RESERVOIR), "--vary", "rl=330,1k,3.3k", "--vary", "c=1u,2u,4.7u,10u",
             *ANALYSIS, "--workers", "1")


def _committed(path: Path) -> int:
    try:
        db = sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=1.0)
    except sqlite3.Error:
        return 0
    try:
        return int(db.execute("SELECT COUNT(*) FROM points").fetchone()[0])
    except sqlite3.Error:
        return 0
    finally:
        db.close()


@pytest.mark.engine
def test_sweep_cli_completes_after_sigkill(tmp_path):
    store = tmp_path / "s.db"
    proc = subprocess.Popen([str(SIMLOOP), *KILL_ARGS, "--store", str(store), "--json", "k.json"],
                            cwd=tmp_path, env=_env(), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, start_new_session=True)
    try:
        deadline = time.monotonic() + 90.0
        while _committed(store) < 2:
            assert proc.poll() is None, f"the sweep ended before 2 points were stored: {proc.communicate()}"
            assert time.monotonic() < deadline, "fewer than 2 points stored within 90 s"
            time.sleep(0.01)
        os.kill(proc.pid, signal.SIGKILL)
    finally:
        try:
            os.killpg(proc.pid, signal.SIGKILL)  # its own session: the engine workers go too
        except ProcessLookupError:
            pass
        proc.wait(timeout=30)
        proc.stdout.close()
        proc.stderr.close()
    kept = _committed(store)
    assert not (tmp_path / "k.json").exists()
    assert 2 <= kept < 12, f"{kept} points were stored before the kill; the test needs fewer"
    rerun = simloop(*KILL_ARGS, "--store", str(store), "--json", "r.json", cwd=tmp_path)
    whole = simloop(*KILL_ARGS, "--store", "fresh.db", "--json", "w.json", cwd=tmp_path)
    assert rerun.returncode == 0 and whole.returncode == 0, (rerun.stderr, whole.stderr)
    resumed = json.loads((tmp_path / "r.json").read_text())
    fresh = json.loads((tmp_path / "w.json").read_text())
    print(f"CLI: killed after {kept} of 12 points; rerun: {resumed['reused']} reused, "
          f"{resumed['simulated']} simulated")
    assert resumed["reused"] == kept >= 1
    assert resumed["reused"] + resumed["simulated"] == 12 == len(resumed["points"])
    assert (fresh["simulated"], fresh["reused"]) == (12, 0)
    for a, b in zip(resumed["points"], fresh["points"]):
        assert a["varied"] == b["varied"]
        assert a["harmonics"] == b["harmonics"]
        assert a["metrics"] == b["metrics"]
        assert a["status"] == b["status"] == "ok"
