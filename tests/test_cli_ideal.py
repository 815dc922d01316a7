"""End-to-end tests of ``simloop ideal`` and of the help texts, through the installed console script.

Every spectrum written by the command is set beside the closed-form Fourier series written out
here (sources beside each formula; REFERENCES.md marks which citations are from memory). The
"done when" criterion of the command: every amplitude for n <= 12 within 1e-9 of the largest one.
"""

from __future__ import annotations

import json
import math
import re
import subprocess
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest
from cli_support import assert_one_line_error, run_simloop

#: The console script installed with simloop (``[project.scripts]`` in pyproject.toml).

#: The command's acceptance criterion: |A_n - closed form| <= 1e-9 max_n A_n, n = 0..12.
CRITERION = 1e-9
ORDERS = 12

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), sec. 5.2 (common practice)


def simloop(*args: str, cwd: Path, timeout: float = 60.0):
    """Run the real console script; output captured as text."""
    return run_simloop(*args, cwd=cwd, timeout=timeout)



# ------------------------------------------------------------------------------- closed forms
# Each returns the trigonometric coefficients (a_n, b_n), n = 0..N, of
# f(t) = a0 + sum a_n cos(n w t) + b_n sin(n w t) (b_0 = 0). The command writes the magnitude-phase
# form A_n cos(n w t - psi_n), so a_n = A_n cos psi_n, b_n = A_n sin psi_n.
def half_wave_series(amp: float, big_n: int) -> tuple[np.ndarray, np.ndarray]:
    """A max(0, cos wt): a0 = A/pi, a1 = A/2, even n: a_n = -(2A/pi)(-1)^(n/2)/(n^2 - 1), odd n >= 3: 0.

    Spiegel, *Mathematical Handbook of Formulas and Tables* (Schaum), Fourier series table
    [from memory].
    """
    a = np.zeros(big_n + 1)
    a[0] = amp / math.pi
    a[1] = amp / 2.0
    for n in range(2, big_n + 1, 2):
        a[n] = -(2.0 * amp / math.pi) * (-1.0) ** (n // 2) / (n * n - 1.0)
    return a, np.zeros(big_n + 1)


def full_wave_series(amp: float, big_n: int) -> tuple[np.ndarray, np.ndarray]:
    """|A cos wt|: a0 = 2A/pi, even n: a_n = -(4A/pi)(-1)^(n/2)/(n^2 - 1), odd n: 0.

    Spiegel, *Mathematical Handbook of Formulas and Tables* (Schaum), Fourier series table
    [from memory].
    """
    a = np.zeros(big_n + 1)
    a[0] = 2.0 * amp / math.pi
    for n in range(2, big_n + 1, 2):
        a[n] = -(4.0 * amp / math.pi) * (-1.0) ** (n // 2) / (n * n - 1.0)
    return a, np.zeros(big_n + 1)


def pulse_series(amp: float, duty: float, big_n: int) -> tuple[np.ndarray, np.ndarray]:
    """Pulse of height A and duty d starting at t = 0.

    Centred pulse: DC A d, A_n = (2A/(n pi))|sin(n pi d)| (Oppenheim & Willsky, *Signals and
    Systems*, 2nd ed. 1997, Example 3.5 [from memory]); starting at t = 0 it is delayed by dT/2,
    which multiplies the one-sided coefficient a_n - j b_n by exp(-j n pi d) (time-shift
    property, same source, sec. 3.5 [from memory]).
    """
    n = np.arange(big_n + 1)
    c = np.zeros(big_n + 1, dtype=complex)
    c[0] = amp * duty
    k = n[1:]
    c[1:] = 2.0 * amp / (k * math.pi) * np.sin(k * math.pi * duty) * np.exp(-1j * k * math.pi * duty)
    return c.real, -c.imag


def square_series(amp: float, big_n: int) -> tuple[np.ndarray, np.ndarray]:
    """Unipolar square wave 0..A, high on the first half period: DC A/2, b_n = 2A/(n pi), odd n.

    Weisstein, "Fourier Series--Square Wave", MathWorld [confirmed] (the +-1 wave has
    b_n = 4/(n pi); scaled by A/2 and lifted by A/2).
    """
    a = np.zeros(big_n + 1)
    b = np.zeros(big_n + 1)
    a[0] = amp / 2.0
    for n in range(1, big_n + 1, 2):
        b[n] = 2.0 * amp / (n * math.pi)
    return a, b


def truncated_cosine_series(peak: float, full_angle_deg: float,
                            big_n: int) -> tuple[np.ndarray, np.ndarray]:
    """Imax (cos wt - cos th)/(1 - cos th) for |wt| <= th (2 th the full angle): a_n = alpha_n Imax.

    alpha_0 = (sin th - th cos th)/(pi (1 - cos th)); alpha_1 = (th - sin th cos th)/(pi (1 - cos th));
    alpha_n = 2 (sin n th cos th - n cos n th sin th)/(pi n (n^2 - 1)(1 - cos th)), n >= 2.
    Cripps, *RF Power Amplifiers for Wireless Communications*, 2nd ed., Artech House 2006, ch. 3
    [from memory].
    """
    th = math.radians(full_angle_deg) / 2.0
    one = 1.0 - math.cos(th)
    a = np.zeros(big_n + 1)
    a[0] = (math.sin(th) - th * math.cos(th)) / (math.pi * one)
    a[1] = (th - math.sin(th) * math.cos(th)) / (math.pi * one)
    for n in range(2, big_n + 1):
        a[n] = (2.0 * (math.sin(n * th) * math.cos(th) - n * math.cos(n * th) * math.sin(th))
                / (math.pi * n * (n * n - 1.0) * one))
    return peak * a, np.zeros(big_n + 1)


def trapezoid_amplitudes(amp: float, duty: float, rise_over_period: float, big_n: int) -> np.ndarray:
    """A_n = 2A (tau/T)|sinc(n tau/T)||sinc(n tr/T)|, tr = tf, tau at the 50 % points; A0 = A tau/T.

    C. R. Paul, *Introduction to Electromagnetic Compatibility*, 2nd ed., Wiley 2006, sec. 3.2
    [from memory]. numpy's sinc is sin(pi x)/(pi x), Paul's convention.
    """
    n = np.arange(big_n + 1)
    amps = 2.0 * amp * duty * np.abs(np.sinc(n * duty)) * np.abs(np.sinc(n * rise_over_period))
    amps[0] = amp * duty
    return amps


def trapezoid_series(amp: float, duty: float, rise_over_period: float,
                     big_n: int) -> tuple[np.ndarray, np.ndarray]:
    """The trapezoid with its rising edge starting at t = 0 (the command's ``--delay 0``).

    Paul's symmetric trapezoid, centred on t = 0, has the real one-sided coefficients
    2A (tau/T) sinc(n tau/T) sinc(n tr/T) (sec. 3.2 [from memory]); starting at t = 0 its centre
    is at (tr + tau)/2, a delay that multiplies them by exp(-j n w (tr + tau)/2) (time-shift
    property, Oppenheim & Willsky 1997, sec. 3.5 [from memory]).
    """
    n = np.arange(big_n + 1)
    c = 2.0 * amp * duty * np.sinc(n * duty) * np.sinc(n * rise_over_period).astype(complex)
    c *= np.exp(-1j * math.pi * n * (rise_over_period + duty))
    c[0] = amp * duty
    return c.real, -c.imag


# ------------------------------------------------------------------------------- cases
# (id, KIND and options, closed-form (a_n, b_n), closed-form A_n)
def _amplitudes(ab: tuple[np.ndarray, np.ndarray]) -> np.ndarray:
    a, b = ab
    amps = np.hypot(a, b)
    amps[0] = a[0]  # the DC term is signed
    return amps


Series = Callable[[], tuple[np.ndarray, np.ndarray]]
CASES: list[tuple[str, list[str], Series, Callable[[], np.ndarray]]] = [
    ("half-wave", ["half-wave", "--amplitude", "12", "--fundamental", "50"],
     lambda: half_wave_series(12.0, ORDERS), lambda: _amplitudes(half_wave_series(12.0, ORDERS))),
    ("full-wave", ["full-wave", "--amplitude", "325m", "--fundamental", "60"],
     lambda: full_wave_series(0.325, ORDERS), lambda: _amplitudes(full_wave_series(0.325, ORDERS))),
    ("pulse-d0.25", ["pulse", "--amplitude", "5", "--duty", "0.25", "--fundamental", "100k"],
     lambda: pulse_series(5.0, 0.25, ORDERS), lambda: _amplitudes(pulse_series(5.0, 0.25, ORDERS))),
    ("pulse-d0.3", ["pulse", "--amplitude", "3.3", "--duty", "300m", "--fundamental", "1meg"],
     lambda: pulse_series(3.3, 0.3, ORDERS), lambda: _amplitudes(pulse_series(3.3, 0.3, ORDERS))),
    ("square", ["square", "--amplitude", "2", "--fundamental", "1k"],
     lambda: square_series(2.0, ORDERS), lambda: _amplitudes(square_series(2.0, ORDERS))),
    ("truncated-cosine-120deg", ["truncated-cosine", "--amplitude", "9.3", "--conduction-angle", "120"],
     lambda: truncated_cosine_series(9.3, 120.0, ORDERS),
     lambda: np.abs(truncated_cosine_series(9.3, 120.0, ORDERS)[0])),
    ("truncated-cosine-240deg", ["truncated-cosine", "--amplitude", "1", "--conduction-angle", "240"],
     lambda: truncated_cosine_series(1.0, 240.0, ORDERS),
     lambda: np.abs(truncated_cosine_series(1.0, 240.0, ORDERS)[0])),
    # Paul's check: 1 V, T = 1 us, tau = 0.5 us, tr = tf = 10 ns
    ("trapezoid", ["trapezoid", "--amplitude", "1", "--fundamental", "1meg", "--duty", "0.5",
                   "--rise", "10n"],
     lambda: trapezoid_series(1.0, 0.5, 0.01, ORDERS),
     lambda: trapezoid_amplitudes(1.0, 0.5, 0.01, ORDERS)),
    ("trapezoid-d0.2", ["trapezoid", "--amplitude", "12", "--fundamental", "250k", "--duty", "0.2",
                        "--rise", "40n", "--fall", "40n"],
     lambda: trapezoid_series(12.0, 0.2, 0.01, ORDERS),
     lambda: trapezoid_amplitudes(12.0, 0.2, 0.01, ORDERS)),
]


def _table_rows(stdout: str) -> list[list[str]]:
    """Rows of the printed table: lines whose first field is the order n."""
    return [line.split() for line in stdout.splitlines() if re.fullmatch(r"\s*\d+\s+.*", line)]


@pytest.fixture(scope="module")
def ideal_outputs(
    tmp_path_factory: pytest.TempPathFactory,
) -> dict[str, tuple[subprocess.CompletedProcess[str], Path]]:
    """One run per case, JSON and PNG written: {case id: (process, its folder)}."""
    out: dict[str, tuple[subprocess.CompletedProcess[str], Path]] = {}
    for case_id, argv, _ab, _amps in CASES:
        folder = tmp_path_factory.mktemp(case_id)
        proc = simloop("ideal", *argv, "--harmonics", str(ORDERS), "--json", "out.json",
                       "--plot", "out.png", cwd=folder)
        out[case_id] = (proc, folder)
    return out


@pytest.mark.parametrize("case_id", [c[0] for c in CASES])
def test_ideal_json_layout(case_id: str, ideal_outputs) -> None:
    proc, folder = ideal_outputs[case_id]
    assert proc.returncode == 0, proc.stderr
    doc = json.loads((folder / "out.json").read_text(encoding="utf-8"))
    kind = next(c[1][0] for c in CASES if c[0] == case_id)
    assert doc["kind"] == kind
    assert isinstance(doc["parameters"], dict) and doc["parameters"]
    rows = doc["harmonics"]
    assert [r["n"] for r in rows] == list(range(ORDERS + 1))
    for r in rows:
        assert {"n", "amplitude_v", "phase_deg"} <= set(r)
        assert isinstance(r["amplitude_v"], float) and isinstance(r["phase_deg"], float)


@pytest.mark.parametrize("case_id", [c[0] for c in CASES])
def test_ideal_amplitudes_match_closed_form(case_id: str, ideal_outputs) -> None:
    proc, folder = ideal_outputs[case_id]
    assert proc.returncode == 0, proc.stderr
    rows = json.loads((folder / "out.json").read_text(encoding="utf-8"))["harmonics"]
    got = np.array([r["amplitude_v"] for r in rows])
    expected = next(c[3] for c in CASES if c[0] == case_id)()
    np.testing.assert_allclose(got, expected, rtol=0, atol=CRITERION * np.max(np.abs(expected)))


@pytest.mark.parametrize("case_id", [c[0] for c in CASES])
def test_ideal_phases_match_closed_form(case_id: str, ideal_outputs) -> None:
    """a_n = A_n cos psi_n and b_n = A_n sin psi_n reproduce the closed-form coefficients."""
    proc, folder = ideal_outputs[case_id]
    assert proc.returncode == 0, proc.stderr
    rows = json.loads((folder / "out.json").read_text(encoding="utf-8"))["harmonics"]
    amp = np.array([r["amplitude_v"] for r in rows])
    psi = np.radians([r["phase_deg"] for r in rows])
    a, b = next(c[2] for c in CASES if c[0] == case_id)()
    scale = CRITERION * np.max(np.hypot(a, b))
    np.testing.assert_allclose(amp * np.cos(psi), a, rtol=0, atol=scale)
    np.testing.assert_allclose(amp[1:] * np.sin(psi[1:]), b[1:], rtol=0, atol=scale)


def test_ideal_trapezoid_paul_check_values(ideal_outputs) -> None:
    """Paul's worked figures (1 V, 1 us, 0.5 us, 10 ns): A1 0.636515, A3 0.211893, A5 0.126801 V."""
    proc, folder = ideal_outputs["trapezoid"]
    assert proc.returncode == 0, proc.stderr
    rows = json.loads((folder / "out.json").read_text(encoding="utf-8"))["harmonics"]
    # C. R. Paul, Introduction to EMC, 2nd ed. 2006, sec. 3.2 [from memory]; 6 printed digits
    for n, value in ((1, 0.636515), (3, 0.211893), (5, 0.126801)):
        assert rows[n]["amplitude_v"] == pytest.approx(value, abs=5e-7)
    assert rows[2]["amplitude_v"] == pytest.approx(0.0, abs=1e-12)  # sinc(n/2) = 0 for even n


@pytest.mark.parametrize("case_id", [c[0] for c in CASES])
def test_ideal_table_has_one_row_per_order(case_id: str, ideal_outputs) -> None:
    proc, _folder = ideal_outputs[case_id]
    assert proc.returncode == 0, proc.stderr
    rows = _table_rows(proc.stdout)
    assert [int(r[0]) for r in rows] == list(range(ORDERS + 1))
    # the printed amplitude (third column, 6 significant digits) is the closed form too
    expected = next(c[3] for c in CASES if c[0] == case_id)()
    printed = np.array([float(r[2]) for r in rows])
    np.testing.assert_allclose(printed, expected, rtol=5e-6, atol=1e-12 * np.max(expected))


@pytest.mark.parametrize("case_id", [c[0] for c in CASES])
def test_ideal_plot_is_a_png(case_id: str, ideal_outputs) -> None:
    import matplotlib.image

    proc, folder = ideal_outputs[case_id]
    assert proc.returncode == 0, proc.stderr
    png = folder / "out.png"
    assert png.read_bytes()[:8] == PNG_SIGNATURE
    image = matplotlib.image.imread(png)
    assert image.ndim == 3 and image.shape[0] > 100 and image.shape[1] > 100


# ------------------------------------------------------------------------------- help
#: Metavars of options that carry a physical quantity, and the unit their help must state.
UNIT_OF_METAVAR = {"V": "[V]", "HZ": "[Hz]", "S": "[s]", "DEG": "degrees", "MIB": "[MiB]", "W": "[W]"}
#: Metavars of dimensionless numeric options: counts, fractions, relative tolerances.
DIMENSIONLESS = {"N", "D", "REL", "P"}
#: Metavars of options that take no number.
NOT_NUMERIC = {"", "PATH", "EXPR", "KIND", "NAME=VALUE"}


def _option_blocks(help_text: str) -> dict[str, tuple[str, str]]:
    """{--option: (metavar, help text)} parsed from argparse's "options:" section."""
    blocks: dict[str, tuple[str, str]] = {}
    current: str | None = None
    in_options = False
    for line in help_text.splitlines():
        if line.rstrip().endswith(":") and not line.startswith(" "):
            in_options = line.strip() in ("options:", "optional arguments:")
            current = None
            continue
        if not in_options:
            continue
        m = re.match(r"^  (-[^\s,]+(?:, -[^\s,]+)*)(?: (\S+))?(?:\s{2,}(.*))?$", line)
        if m:
            current = m.group(1).split(", ")[-1]
            blocks[current] = (m.group(2) or "", m.group(3) or "")
        elif current is not None and line.startswith(" " * 6):
            metavar, text = blocks[current]
            blocks[current] = (metavar, (text + " " + line.strip()).strip())
    return blocks


def test_help_top_level_exits_zero(tmp_path: Path) -> None:
    proc = simloop("--help", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    for command in ("ideal", "run", "netlists", "demo"):
        assert re.search(rf"^\s+{command}\s+\S", proc.stdout, re.MULTILINE), command
    assert "[V" in proc.stdout  # amplitudes are peak values [V or A]
    assert "Exit codes" in proc.stdout
    assert "Traceback" not in proc.stdout + proc.stderr


@pytest.mark.parametrize("command", ["ideal", "run"])
def test_help_every_numeric_option_states_its_unit(command: str, tmp_path: Path) -> None:
    proc = simloop(command, "--help", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    blocks = _option_blocks(proc.stdout)
    assert "--fundamental" in blocks and "--amplitude" in blocks, blocks
    numeric = 0
    for option, (metavar, text) in blocks.items():
        if metavar in UNIT_OF_METAVAR:
            numeric += 1
            assert UNIT_OF_METAVAR[metavar] in text, (option, text)
        elif metavar in DIMENSIONLESS:
            numeric += 1
            assert re.search(r"\d", text), (option, text)  # its range or default is stated
        else:  # a new numeric option must join one of the tables above
            assert metavar in NOT_NUMERIC or metavar.startswith("{"), (option, metavar)
    assert numeric >= 5
    assert "[Hz]" in blocks["--fundamental"][1] and "[V]" in blocks["--amplitude"][1]


# ------------------------------------------------------------------------------- bad input
BAD_INPUTS = [
    ("pulse-no-duty", ["pulse", "--amplitude", "1"], "duty"),
    ("duty-1.5", ["pulse", "--amplitude", "1", "--duty", "1.5"], "duty"),
    ("duty-abc", ["pulse", "--amplitude", "1", "--duty", "abc"], "duty"),
    ("harmonics-0", ["square", "--amplitude", "1", "--harmonics", "0"], "harmonics"),
    ("harmonics-100000", ["square", "--amplitude", "1", "--harmonics", "100000"], "harmonics"),
    ("amplitude-negative", ["half-wave", "--amplitude", "-1"], "amplitude"),
    ("fundamental-0", ["half-wave", "--amplitude", "1", "--fundamental", "0"], "fundamental"),
    ("unknown-kind", ["sawtooth", "--amplitude", "1"], "sawtooth"),
    ("angle-missing", ["truncated-cosine", "--amplitude", "1"], "conduction"),
    ("angle-400", ["truncated-cosine", "--amplitude", "1", "--conduction-angle", "400"], "conduction"),
    ("trapezoid-no-rise", ["trapezoid", "--amplitude", "1", "--duty", "0.5"], "rise"),
    ("amplitude-missing", ["square"], "amplitude"),
]


@pytest.mark.parametrize(("argv", "named"), [c[1:] for c in BAD_INPUTS], ids=[c[0] for c in BAD_INPUTS])
def test_ideal_bad_input_one_line_exit_2(argv: list[str], named: str, tmp_path: Path) -> None:
    proc = simloop("ideal", *argv, "--json", "out.json", cwd=tmp_path)
    line = assert_one_line_error(proc)
    assert named in line.lower(), line
    assert proc.stdout == ""
    assert not (tmp_path / "out.json").exists()


def test_ideal_bad_angle_message_in_degrees(tmp_path: Path) -> None:
    proc = simloop("ideal", "truncated-cosine", "--amplitude", "1", "--conduction-angle", "400",
                   cwd=tmp_path)
    line = assert_one_line_error(proc)
    assert "400" in line, line


def test_ideal_unwritable_json_keeps_table_and_plot(tmp_path: Path) -> None:
    """A failing --json does not lose what was computed: the table is printed, the plot written."""
    (tmp_path / "a-file").write_text("not a folder\n", encoding="utf-8")
    proc = simloop("ideal", "square", "--amplitude", "1", "--harmonics", str(ORDERS),
                   "--json", "a-file/out.json", "--plot", "ok.png", cwd=tmp_path)
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stdout + proc.stderr
    errors = [ln for ln in proc.stderr.splitlines() if "error" in ln]
    assert len(errors) == 1 and "a-file/out.json" in errors[0], proc.stderr
    others = [ln for ln in proc.stderr.splitlines() if ln not in errors]
    assert all(ln.startswith("wrote ") for ln in others), proc.stderr
    assert [int(r[0]) for r in _table_rows(proc.stdout)] == list(range(ORDERS + 1))
    assert (tmp_path / "ok.png").read_bytes()[:8] == PNG_SIGNATURE
    assert (tmp_path / "a-file").read_text(encoding="utf-8") == "not a folder\n"
