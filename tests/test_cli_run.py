"""End-to-end tests of ``simloop run`` and ``simloop netlists``: the installed console script
driving the real ngspice engine.

Engine runs are few and short (50 Hz circuits, ``--harmonics 6``): each takes 1-5 s.
"""

from __future__ import annotations

import json
import math
import re
import subprocess
from pathlib import Path

import numpy as np
import pytest
from cli_support import assert_one_line_error, run_simloop

#: The console script installed with simloop (``[project.scripts]`` in pyproject.toml).
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), sec. 5.2 (common practice)
ORDERS = 6
BUILTINS = ("centre-tap", "full-wave-bridge", "half-wave", "switching-stage")


def simloop(*args: str, cwd: Path, timeout: float = 180.0):
    """Run the real console script; output captured as text."""
    return run_simloop(*args, cwd=cwd, timeout=timeout)



def half_wave_sine_series(amp: float, big_n: int) -> tuple[np.ndarray, np.ndarray]:
    """(a_n, b_n) of A max(0, sin wt) = A/pi + (A/2) sin wt - (2A/pi) sum_k cos(2k wt)/(4k^2 - 1).

    Spiegel, *Mathematical Handbook of Formulas and Tables* (Schaum), Fourier series table
    [from memory]. The built-in half-wave circuit is driven by a SPICE SIN source (sine reference).
    """
    a = np.zeros(big_n + 1)
    b = np.zeros(big_n + 1)
    a[0] = amp / math.pi
    b[1] = amp / 2.0
    for n in range(2, big_n + 1, 2):
        a[n] = -(2.0 * amp / math.pi) / (n * n - 1.0)
    return a, b


HALF_WAVE_NETLIST = """* user half-wave rectifier, 10 V 50 Hz into 1 kOhm
Vs in 0 SIN(0 10 50)
D1 in out dmine
Rload out 0 1k
.model dmine D(IS=1e-14 N=1)
.tran 0.1m 100m
.end
"""


# ------------------------------------------------------------------------------- one default run
@pytest.fixture(scope="module")
def default_run(
    tmp_path_factory: pytest.TempPathFactory,
) -> tuple[subprocess.CompletedProcess[str], Path]:
    folder = tmp_path_factory.mktemp("half-wave")
    proc = simloop("run", "half-wave", "--harmonics", str(ORDERS), "--json", "r.json",
                   "--plot", "r.png", cwd=folder)
    return proc, folder


def _doc(run: tuple[subprocess.CompletedProcess[str], Path], name: str = "r.json") -> dict:
    proc, folder = run
    assert proc.returncode == 0, (proc.stdout, proc.stderr)
    return json.loads((folder / name).read_text(encoding="utf-8"))


@pytest.mark.engine
def test_run_half_wave_exit_zero_and_layout(default_run) -> None:
    proc, _folder = default_run
    assert "Traceback" not in proc.stdout + proc.stderr
    doc = _doc(default_run)
    assert {"circuit", "parameters", "probe", "fundamental_hz", "engine", "steady_state",
            "metrics", "harmonics"} <= set(doc)
    assert doc["circuit"] == "half-wave"
    assert doc["probe"] == "v(out)"
    assert doc["fundamental_hz"] == 50.0
    assert doc["engine"]["name"] == "ngspice"
    assert re.fullmatch(r"\d+(\.\d+)*\S*", str(doc["engine"]["version"])), doc["engine"]
    st = doc["steady_state"]
    assert {"periods_simulated", "converged", "residual"} <= set(st)
    assert st["converged"] is True
    assert isinstance(st["periods_simulated"], int) and st["periods_simulated"] >= 1
    assert 0.0 <= st["residual"] <= 1e-6  # the default --tolerance
    assert {"dc_v", "rms_v", "thd", "ripple_v"} <= set(doc["metrics"])
    rows = doc["harmonics"]
    keys = {"n", "freq_hz", "ideal_v", "ideal_phase_deg", "estimate_v", "sim_v", "sim_phase_deg",
            "delta_db"}
    assert all(keys <= set(r) for r in rows)
    assert [r["n"] for r in rows] == list(range(ORDERS + 1))
    for r in rows:
        assert r["freq_hz"] == pytest.approx(50.0 * r["n"], rel=1e-15, abs=0.0)


@pytest.mark.engine
def test_run_half_wave_ideal_column_is_the_closed_form(default_run) -> None:
    rows = _doc(default_run)["harmonics"]
    a, b = half_wave_sine_series(12.0, ORDERS)  # vpk = 12 V, the circuit's default
    amps = np.hypot(a, b)
    ideal = np.array([r["ideal_v"] for r in rows])
    np.testing.assert_allclose(ideal, amps, rtol=0, atol=1e-12 * amps.max())
    psi = np.radians([r["ideal_phase_deg"] for r in rows])
    np.testing.assert_allclose(ideal * np.cos(psi), a, rtol=0, atol=1e-12 * amps.max())
    np.testing.assert_allclose(ideal[1:] * np.sin(psi[1:]), b[1:], rtol=0, atol=1e-12 * amps.max())


@pytest.mark.engine
def test_run_half_wave_diode_drop_lowers_dc(default_run) -> None:
    rows = _doc(default_run)["harmonics"]
    deficit = 1.0 - rows[0]["sim_v"] / rows[0]["ideal_v"]
    # A silicon rectifier drops ~0.7-1 V of a 12 V peak: DC 3-12 % below the ideal (common practice)
    assert 0.03 <= deficit <= 0.12, deficit


@pytest.mark.engine
def test_run_half_wave_delta_db_recomputed(default_run) -> None:
    rows = _doc(default_run)["harmonics"]
    for r in rows:
        if r["n"] in (3, 5):  # ideal is zero: no ratio
            assert r["ideal_v"] == 0.0 and r["delta_db"] is None, r
            continue
        expected = 20.0 * math.log10(r["sim_v"] / r["ideal_v"])
        assert r["delta_db"] == pytest.approx(expected, rel=0, abs=1e-9), r


@pytest.mark.engine
def test_run_half_wave_metrics_agree_with_harmonics(default_run) -> None:
    doc = _doc(default_run)
    m = doc["metrics"]
    sim = np.array([r["sim_v"] for r in doc["harmonics"]])
    # THD re the fundamental: sqrt(sum_{n>=2} A_n^2) / A_1 over the orders reported (common practice)
    assert m["thd"] == pytest.approx(math.sqrt(np.sum(sim[2:] ** 2)) / sim[1], rel=1e-9)
    # Parseval: the mean square is at least DC^2 + sum A_n^2 / 2 over any set of orders
    assert m["rms_v"] ** 2 >= (sim[0] ** 2 + np.sum(sim[1:] ** 2) / 2.0) * (1 - 1e-9)
    # the output never exceeds the 12 V source peak, so its peak-to-peak ripple is below it
    assert 0.0 < m["ripple_v"] < 12.0
    assert m["dc_v"] == pytest.approx(sim[0], rel=1e-6)


@pytest.mark.engine
def test_run_half_wave_plot_is_a_png(default_run) -> None:
    import matplotlib.image

    proc, folder = default_run
    assert proc.returncode == 0, proc.stderr
    png = folder / "r.png"
    assert png.read_bytes()[:8] == PNG_SIGNATURE
    image = matplotlib.image.imread(png)
    assert image.ndim == 3 and image.shape[0] > 100 and image.shape[1] > 100


@pytest.mark.engine
def test_run_half_wave_printed_table(default_run) -> None:
    proc, _folder = default_run
    rows = [ln.split() for ln in proc.stdout.splitlines() if re.fullmatch(r"\s+\d+\s+\S+\s+.*", ln)]
    assert [int(r[0]) for r in rows] == list(range(ORDERS + 1))
    assert "steady state reached" in proc.stdout


@pytest.mark.engine
def test_run_set_values_and_choice_applied(default_run, tmp_path: Path) -> None:
    proc = simloop("run", "half-wave", "--harmonics", str(ORDERS), "--set", "rload=1k",
                   "--set", "diode=sl_schottky", "--json", "s.json", cwd=tmp_path)
    assert proc.returncode == 0, (proc.stdout, proc.stderr)
    doc = json.loads((tmp_path / "s.json").read_text(encoding="utf-8"))
    assert doc["parameters"]["rload"] == 1000.0
    assert doc["choices"]["diode"] == "sl_schottky"
    assert doc["steady_state"]["converged"] is True
    # A Schottky diode drops less than a silicon rectifier, and a 1 kOhm load draws a tenth of
    # the current: the DC deficit is smaller than in the default run (common practice)
    dc = doc["harmonics"][0]
    default_dc = _doc(default_run)["harmonics"][0]
    deficit = 1.0 - dc["sim_v"] / dc["ideal_v"]
    assert 0.0 < deficit < 1.0 - default_dc["sim_v"] / default_dc["ideal_v"]


# ------------------------------------------------------------------------------- netlists
def test_netlists_lists_builtins_with_units(tmp_path: Path) -> None:
    text = simloop("netlists", cwd=tmp_path)
    js = simloop("netlists", "--json", cwd=tmp_path)
    assert text.returncode == 0 and js.returncode == 0, (text.stderr, js.stderr)
    doc = json.loads(js.stdout)
    assert sorted(c["name"] for c in doc) == list(BUILTINS)
    blocks = re.split(r"\n(?=\S)", text.stdout.strip())
    for circuit in doc:
        block = next(b for b in blocks if b.startswith(circuit["name"] + ":"))
        assert circuit["parameters"], circuit["name"]
        for name, spec in circuit["parameters"].items():
            assert spec["unit"], (circuit["name"], name)
            line = next(ln for ln in block.splitlines() if ln.split()[:1] == [name])
            assert f" {spec['unit']} " in line, line
    half = next(c for c in doc if c["name"] == "half-wave")
    assert half["parameters"]["vpk"]["unit"] == "V"
    assert half["parameters"]["freq"]["unit"] == "Hz"
    assert half["parameters"]["rload"]["unit"] == "ohm"
    assert "sl_schottky" in half["choices"]["diode"]["allowed"]


# ------------------------------------------------------------------------------- bad input
BAD_RUNS = [
    ("unknown-circuit", ["no-such-circuit"], "no-such-circuit"),
    ("unknown-parameter", ["half-wave", "--set", "nosuch=1"], "nosuch"),
    ("not-a-number", ["half-wave", "--set", "rload=abc"], "rload"),
    ("out-of-range", ["half-wave", "--set", "rload=-5"], "range"),
    ("semicolon-construct", ["half-wave", "--set", "rload=1k;.control"], "rload"),
    ("fundamental-0", ["half-wave", "--fundamental", "0"], "fundamental"),
    ("unknown-node", ["half-wave", "--probe", "v(nosuch)"], "nosuch"),
    ("unknown-probe-kind", ["half-wave", "--probe", "x(out)"], "x(out)"),
    ("unknown-choice-model", ["half-wave", "--set", "diode=no_such_model"], "no_such_model"),
    ("harmonics-5000", ["half-wave", "--harmonics", "5000"], "harmonics"),
    ("max-periods-3", ["half-wave", "--max-periods", "3"], "max-periods"),
]


@pytest.mark.parametrize(("argv", "named"), [c[1:] for c in BAD_RUNS], ids=[c[0] for c in BAD_RUNS])
def test_run_bad_input_one_line_exit_2(argv: list[str], named: str, tmp_path: Path) -> None:
    proc = simloop("run", *argv, "--json", "r.json", cwd=tmp_path)
    line = assert_one_line_error(proc)
    assert named in line, line
    assert proc.stdout == ""
    assert not (tmp_path / "r.json").exists()


def test_run_netlist_without_periodic_source_refused(tmp_path: Path) -> None:
    (tmp_path / "dc.cir").write_text(
        "* divider on a DC rail\nV1 in 0 DC 5\nR1 in out 1k\nR2 out 0 1k\n.tran 1m 10m\n.end\n",
        encoding="utf-8")
    proc = simloop("run", "dc.cir", "--probe", "v(out)", "--fundamental", "50", "--amplitude", "5",
                   cwd=tmp_path)
    line = assert_one_line_error(proc)
    assert "SIN or PULSE" in line, line


@pytest.mark.engine
def test_run_no_steady_state_exit_2_json_kept(tmp_path: Path) -> None:
    """A 0.1 F reservoir behind 1 kOhm (tau = 100 s) cannot settle within 12 periods of 50 Hz."""
    proc = simloop("run", "half-wave", "--harmonics", str(ORDERS), "--set", "cres=0.1",
                   "--set", "rsrc=1k", "--max-periods", "12", "--tolerance", "1e-15",
                   "--json", "nc.json", cwd=tmp_path)
    assert proc.returncode == 2, (proc.stdout, proc.stderr)
    assert "Traceback" not in proc.stdout + proc.stderr
    errors = [ln for ln in proc.stderr.splitlines() if "error" in ln]
    assert len(errors) == 1, proc.stderr
    assert "steady state" in errors[0] and "12 periods" in errors[0], errors[0]
    assert all(ln.startswith("wrote ") or ln in errors for ln in proc.stderr.splitlines())
    doc = json.loads((tmp_path / "nc.json").read_text(encoding="utf-8"))
    assert doc["steady_state"]["converged"] is False
    assert [r["n"] for r in doc["harmonics"]] == list(range(ORDERS + 1))
    assert "NOT reached" in proc.stdout


# ------------------------------------------------------------------------------- a user netlist
@pytest.mark.engine
def test_run_user_netlist_replaces_its_tran(tmp_path: Path) -> None:
    (tmp_path / "mine.cir").write_text(HALF_WAVE_NETLIST, encoding="utf-8")
    proc = simloop("run", "mine.cir", "--probe", "v(out)", "--ideal", "half-wave",
                   "--harmonics", str(ORDERS), "--json", "u.json", cwd=tmp_path)
    assert proc.returncode == 0, (proc.stdout, proc.stderr)
    notes = [ln for ln in proc.stdout.splitlines() if ln.strip().startswith("note:")]
    assert any(".tran" in ln for ln in notes), proc.stdout
    doc = json.loads((tmp_path / "u.json").read_text(encoding="utf-8"))
    assert any(".tran" in note for note in doc["notes"]), doc["notes"]
    assert doc["fundamental_hz"] == 50.0 and doc["amplitude_v"] == 10.0  # from SIN(0 10 50)
    assert doc["steady_state"]["converged"] is True
    a, b = half_wave_sine_series(10.0, ORDERS)
    amps = np.hypot(a, b)
    ideal = np.array([r["ideal_v"] for r in doc["harmonics"]])
    np.testing.assert_allclose(ideal, amps, rtol=0, atol=1e-12 * amps.max())
    deficit = 1.0 - doc["harmonics"][0]["sim_v"] / doc["harmonics"][0]["ideal_v"]
    assert 0.03 <= deficit <= 0.15, deficit  # ~0.6 V junction drop of a 10 V peak (common practice)
