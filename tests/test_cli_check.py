"""End-to-end tests of ``simloop check``: the installed console script, the real ngspice engine.

The example designs in ``examples/`` run once per module (11 corners that pass, 2 that fail on
purpose), all into one results store in a temporary folder; the other tests add a few short
50 Hz corners (``harmonics`` 4..6). Expected values are recomputed here from the stored points'
harmonic rows with the definitions (dBV, dBc, THD, efficiency, margins) and, for the deviation
from ideal, from the closed-form half-wave series.
"""

from __future__ import annotations

import json
import math
import re
import sqlite3
import time
import tomllib
import xml.etree.ElementTree as ET
from pathlib import Path
from types import SimpleNamespace

import pytest
from cli_support import run_simloop

pytestmark = pytest.mark.engine

#: The console script installed with simloop (``[project.scripts]`` in pyproject.toml).
REPO = Path(__file__).resolve().parent.parent
PASSING = ("examples/rail-preregulator.toml", "examples/clock-comb-doubler.toml",
           "examples/rf-level-detector.toml")
FAILING = "examples/sensor-bridge-undersized-cap.toml"


def simloop(*args: str | Path, cwd: Path = REPO, timeout: float = 300.0):
    """Run the real console script; output captured as text."""
    return run_simloop(*args, cwd=cwd, timeout=timeout, env={})

def expected_cases(design: Path) -> int:
    """Corners x limits of a design file without skips, counted from its TOML here."""
    data = tomllib.loads(design.read_text())
    grid = math.prod(len(v) for v in data.get("corners", {}).values())
    listed = max(1, len(data.get("corner", [])))
    assert not any(ov.get("skip") for lim in data["limit"] for ov in lim.get("override", []))
    return grid * listed * len(data["limit"])


def stored_points(store: Path) -> list[dict]:
    """Every point document in the store, read with plain SQL."""
    with sqlite3.connect(store) as db:
        return [json.loads(row[0]) for row in db.execute("SELECT document FROM points")]


def junit(path: Path) -> ET.Element:
    root = ET.parse(path).getroot()  # well-formed XML or this raises
    assert root.tag == "testsuites"
    return root


NUMBER = r"[-+]?(?:\d+\.?\d*(?:e[-+]?\d+)?|inf)"


@pytest.fixture(scope="module")
def examples(tmp_path_factory: pytest.TempPathFactory) -> SimpleNamespace:
    out = tmp_path_factory.mktemp("check")
    store = out / "store.db"
    start = time.perf_counter()
    passing = simloop("check", *PASSING, "--junit", out / "pass.xml", "--summary", out / "pass.md",
                      "--json", out / "pass.json", "--store", store, "--workers", "2")
    t_pass = time.perf_counter() - start
    start = time.perf_counter()
    failing = simloop("check", FAILING, "--junit", out / "fail.xml", "--summary", out / "fail.md",
                      "--json", out / "fail.json", "--store", store, "--workers", "2")
    t_fail = time.perf_counter() - start
    return SimpleNamespace(out=out, store=store, passing=passing, failing=failing,
                           t_pass=t_pass, t_fail=t_fail)


# ------------------------------------------------------------------------------ exit codes
def test_check_passing_examples_exit_zero(examples) -> None:
    p = examples.passing
    assert p.returncode == 0, (p.stdout, p.stderr)
    assert "Traceback" not in p.stdout + p.stderr
    total = sum(expected_cases(REPO / d) for d in PASSING)
    assert f"3 designs, {total} checks: {total} pass, 0 FAIL, 0 ERROR (exit 0)" in p.stdout


def test_check_failing_example_exit_one(examples) -> None:
    p = examples.failing
    assert p.returncode == 1, (p.stdout, p.stderr)
    assert "Traceback" not in p.stdout + p.stderr
    rows = [line.split() for line in p.stdout.splitlines() if line.startswith("  FAIL ")]
    assert len(rows) == 2
    # Failures come first in the table: the two FAIL rows precede every pass row.
    lines = p.stdout.splitlines()
    first_pass = next(i for i, ln in enumerate(lines) if ln.startswith("  pass "))
    assert all(i < first_pass for i, ln in enumerate(lines) if ln.startswith("  FAIL "))


def test_check_recheck_reuses_the_store(examples) -> None:
    start = time.perf_counter()
    again = simloop("check", *PASSING, "--store", examples.store, "--workers", "2")
    elapsed = time.perf_counter() - start
    assert again.returncode == 0, again.stderr
    for design in PASSING:
        n = expected_cases(REPO / design) // len(tomllib.loads((REPO / design).read_text())["limit"])
        assert f"{n} corners (0 simulated, {n} reused from the store)" in again.stdout
    print(f"\nfirst check of the passing examples {examples.t_pass:.1f} s, failing example "
          f"{examples.t_fail:.1f} s, re-check from the store {elapsed:.1f} s")


# ------------------------------------------------------------------------------ JUnit
def test_check_junit_counts_passing(examples) -> None:
    root = junit(examples.out / "pass.xml")
    suites = root.findall("testsuite")
    assert [s.get("name") for s in suites] == [Path(d).stem for d in PASSING]
    total = 0
    for suite, design in zip(suites, PASSING):
        cases = suite.findall("testcase")
        assert len(cases) == expected_cases(REPO / design) == int(suite.get("tests"))
        assert suite.get("failures") == "0" and suite.get("errors") == "0"
        for case in cases:
            assert case.find("failure") is None and case.find("error") is None
            out = case.find("system-out").text
            assert re.search(rf"= {NUMBER}.* margin \+{NUMBER}", out), out
        total += len(cases)
    assert (root.get("tests"), root.get("failures"), root.get("errors")) == (str(total), "0", "0")


def test_check_junit_failures_carry_value_and_margin(examples) -> None:
    root = junit(examples.out / "fail.xml")
    (suite,) = root.findall("testsuite")
    cases = suite.findall("testcase")
    assert len(cases) == expected_cases(REPO / FAILING) == int(suite.get("tests")) == 6
    failed = {c.get("name"): c.find("failure") for c in cases if c.find("failure") is not None}
    assert set(failed) == {"ripple the regulator tolerates [full load]",
                           "100 Hz line at the regulator input [full load]"}
    assert (suite.get("failures"), suite.get("errors")) == ("2", "0")
    assert (root.get("tests"), root.get("failures"), root.get("errors")) == ("6", "2", "0")
    (full_load,) = [p for p in stored_points(examples.store)
                    if p["circuit"] == "full-wave-bridge" and p["parameters"]["cres"] == 470e-6
                    and p["parameters"]["rload"] == 100.0]
    a2 = next(r["sim_v"] for r in full_load["harmonics"] if r["n"] == 2)
    independent = {
        "ripple the regulator tolerates [full load]": (full_load["metrics"]["ripple_v"], 1.0),
        # dBV re 1 V rms of a sinusoid of peak A: 20 log10(A / sqrt 2) (common practice)
        "100 Hz line at the regulator input [full load]": (20 * math.log10(a2 / math.sqrt(2)), -10.0),
    }
    for name, failure in failed.items():
        message = failure.get("message")
        m = re.search(rf"= ({NUMBER}) \S+ at full load: bound <= ({NUMBER}) \S+, margin ({NUMBER})",
                      message)
        assert m, message
        value, bound, margin = map(float, m.groups())
        expected_value, expected_bound = independent[name]
        assert value == pytest.approx(expected_value, rel=1e-4)  # 5 significant digits shown
        assert bound == expected_bound
        assert margin == pytest.approx(expected_bound - expected_value, rel=1e-4)  # <=: bound - value
        assert margin < 0
        assert failure.get("type") == "limit" and "full load" in failure.text
        assert case_line(cases, name) == limit_line(REPO / FAILING, name)


def case_line(cases, name: str) -> int:
    return int(next(c for c in cases if c.get("name") == name).get("line"))


def limit_line(design: Path, name: str) -> int:
    """Line of the [[limit]] whose name is given as the case's prefix (found here in the text)."""
    label = name.rsplit(" [", 1)[0]
    lines = design.read_text().splitlines()
    at = next(i for i, ln in enumerate(lines) if ln.strip() == f'name = "{label}"')
    return next(i for i in range(at, -1, -1) if lines[i].strip() == "[[limit]]") + 1


def test_check_summary_markdown(examples) -> None:
    text = (examples.out / "fail.md").read_text()
    assert text.startswith("## simloop check: limits FAIL\n")
    assert "**4 pass, 2 fail, 0 error** (exit code 1)" in text
    fail_rows = [ln for ln in text.splitlines() if ln.startswith("| FAIL |")]
    assert len(fail_rows) == 4  # the failures table, then again in the full table
    assert any("ripple the regulator tolerates" in r and "| full load |" in r and "<= 1 V" in r
               for r in fail_rows)
    assert (examples.out / "pass.md").read_text().startswith("## simloop check: all limits hold\n")


# ------------------------------------------------------------------------------ values
ALL_METRICS = '''\
title = "every metric kind on the built-in half-wave"
circuit = "half-wave"
[settings]
harmonics = 6
[corners]
rload = [100, "1k"]
[[limit]]
metric = "dc_v"
min = 3.4
[[limit]]
metric = "rms_v"
max = 6
[[limit]]
metric = "ripple_v"
max = 11.5
[[limit]]
metric = "peak_v"
max = "11.2"
[[limit]]
metric = "trough_v"
min = -1
[[limit]]
metric = "thd"
max = 0.47
[[limit]]
metric = "h0_v"
min = 3
[[limit]]
metric = "h2_v"
min = 2.4
max = 2.6
[[limit]]
metric = "h0_dbv"
min = 10.7
[[limit]]
metric = "h4_dbv"
max = -10
[[limit]]
metric = "h2_dbc"
max = -6.9
[[limit]]
metric = "h6_dbc"
carrier = 2
max = -22
[[limit]]
metric = "h2_delta_db"
min = -0.2
[[limit]]
metric = "h0_efficiency"
min = 0.36
[[limit]]
metric = "h2_efficiency"
max = 0.1
[[limit]]
metric = "conduction_angle_deg"
min = 170
'''


def half_wave_ideal(n: int, amp: float) -> float:
    """Peak amplitude A_n of A max(0, sin wt): A/pi, A/2, (2A/pi)/(n^2 - 1) for even n.

    Spiegel, *Mathematical Handbook of Formulas and Tables* (Schaum), Fourier series table
    [from memory].
    """
    if n == 0:
        return amp / math.pi
    if n == 1:
        return amp / 2
    return 2 * amp / math.pi / (n * n - 1) if n % 2 == 0 else 0.0


def independent(metric: str, carrier: int, pt: dict) -> float:
    """A metric recomputed from the point's stored harmonic rows (common practice definitions)."""
    a = {r["n"]: r["sim_v"] for r in pt["harmonics"]}
    m = pt["metrics"]
    load = pt["parameters"]["rload"]
    if metric == "thd":  # sqrt(sum_{n=2..N} A_n^2) / A_1
        return math.sqrt(sum(a[n] ** 2 for n in range(2, 7))) / a[1]
    if metric in ("dc_v", "rms_v", "ripple_v", "peak_v", "trough_v", "conduction_angle_deg"):
        return m[metric]
    n, form = int(metric[1:].split("_")[0]), metric.split("_", 1)[1]
    if form == "v":
        return a[n]
    if form == "dbv":  # re 1 V rms: |A0| for DC, A_n / sqrt 2 for a sinusoid
        return 20 * math.log10(abs(a[0]) if n == 0 else a[n] / math.sqrt(2))
    if form == "dbc":
        return 20 * math.log10(a[n] / a[carrier])
    if form == "delta_db":
        return 20 * math.log10(a[n] / half_wave_ideal(n, pt["parameters"]["vpk"]))
    # efficiency: load power at n over source power, A0^2/R for DC and A_n^2/(2R) for n >= 1
    power = a[0] ** 2 / load if n == 0 else a[n] ** 2 / (2 * load)
    return power / m["source_power_w"]


def test_check_metric_values_recomputed(tmp_path: Path) -> None:
    design = tmp_path / "every.toml"
    design.write_text(ALL_METRICS)
    store = tmp_path / "s.db"
    proc = simloop("check", design, "--json", tmp_path / "v.json", "--store", store,
                   "--workers", "2", cwd=tmp_path)
    assert proc.returncode in (0, 1), proc.stderr
    doc = json.loads((tmp_path / "v.json").read_text())
    verdicts = doc["designs"][0]["verdicts"]
    limits = tomllib.loads(ALL_METRICS)["limit"]
    assert len(verdicts) == 2 * len(limits)
    points = {p["parameters"]["rload"]: p for p in stored_points(store)}
    assert sorted(points) == [100.0, 1000.0]
    kinds = set()
    for v in verdicts:
        spec = next(lim for lim in limits if lim["metric"] == v["metric"])
        pt = points[v["parameters"]["rload"]]
        value = independent(spec["metric"], spec.get("carrier", 1), pt)
        assert v["value"] == pytest.approx(value, rel=1e-9), v
        lo = spec.get("min")
        hi = spec.get("max")
        lo = None if lo is None else float(lo)
        hi = None if hi is None else float(hi)
        margins = ([value - lo] if lo is not None else []) + ([hi - value] if hi is not None else [])
        assert v["margin"] == pytest.approx(min(margins), rel=1e-9, abs=1e-12), v
        assert v["status"] == ("pass" if min(margins) >= 0 else "fail")
        kinds.add(v["metric"])
    assert kinds == {lim["metric"] for lim in limits}
    assert {v["status"] for v in verdicts} == {"pass", "fail"}
    assert proc.returncode == 1
    for pt in points.values():
        a = {r["n"]: r["sim_v"] for r in pt["harmonics"]}
        m = pt["metrics"]
        # Bessel's inequality: the mean square is at least A0^2 + sum A_n^2 / 2 (common practice).
        assert m["rms_v"] ** 2 >= a[0] ** 2 + sum(a[n] ** 2 for n in range(1, 7)) / 2 - 1e-9
        assert m["ripple_v"] == pytest.approx(m["peak_v"] - m["trough_v"], rel=1e-12)


# ------------------------------------------------------------------------------ errors
def test_check_invalid_files_exit_two_before_simulating(tmp_path: Path) -> None:
    (tmp_path / "good.toml").write_text('circuit = "half-wave"\n[[limit]]\nmetric = "dc_v"\nmin = 1\n')
    (tmp_path / "bad1.toml").write_text('circuit = "half-wave"\n[[limit]]\nmetric = "dc_volts"\nmin = 1\n')
    (tmp_path / "bad2.toml").write_text('circuit = "half-wave"\n[corners]\nrload = [10, 10]\n'
                                        '[[limit]]\nmetric = "dc_v"\nmin = 1\n')
    proc = simloop("check", "good.toml", "bad1.toml", "bad2.toml", "--store", "s.db", cwd=tmp_path)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stdout + proc.stderr
    assert proc.stdout == ""
    assert proc.stderr.splitlines() == [
        "simloop check: error: bad1.toml:3: limit[1].metric: 'dc_volts' is not a metric; use one "
        "of dc_v, rms_v, ripple_v, peak_v, trough_v, thd, conduction_angle_deg, power_factor, "
        "displacement_factor, mains_margin_a, hN_v, hN_dbv, hN_dbc, hN_delta_db, hN_efficiency "
        "(N a harmonic order, e.g. h2_dbc)",
        "simloop check: error: bad2.toml:3: corners.rload[2]: the value 10 is listed twice; give "
        "each once",
    ]
    assert not (tmp_path / "s.db").exists()  # nothing ran, nothing was stored


def test_check_not_available_metric_exit_two(tmp_path: Path) -> None:
    (tmp_path / "fw.toml").write_text('''\
circuit = "full-wave-bridge"
[settings]
harmonics = 4
[[limit]]
metric = "thd"
max = 0.1
[[limit]]
metric = "h4_dbc"
max = -10
[[limit]]
metric = "h4_dbc"
carrier = 2
max = -10
''')
    proc = simloop("check", "fw.toml", "--junit", "r.xml", "--store", "s.db", cwd=tmp_path)
    assert proc.returncode == 2, proc.stderr
    root = junit(tmp_path / "r.xml")
    (suite,) = root.findall("testsuite")
    errors = [c.find("error") for c in suite.findall("testcase") if c.find("error") is not None]
    assert (suite.get("tests"), suite.get("errors"), suite.get("failures")) == ("3", "2", "0")
    assert {e.get("type") for e in errors} == {"not available"}
    assert any("has no fundamental" in e.get("message") for e in errors)
    assert any("the fundamental is absent" in e.get("message") for e in errors)
    # the same dBc against the 2nd harmonic (present in a full-wave output) is judged
    passed = [c for c in suite.findall("testcase") if c.find("system-out") is not None]
    assert len(passed) == 1 and "h4_dbc" in passed[0].get("name")


def test_check_unconverged_and_failed_simulations_exit_two(tmp_path: Path) -> None:
    (tmp_path / "slow.toml").write_text('''\
circuit = "half-wave"
[settings]
harmonics = 4
steady = "settle"
max_periods = 12
[parameters]
cres = "10000u"
rload = "1k"
[[limit]]
metric = "dc_v"
min = 1
''')
    (tmp_path / "toofine.toml").write_text('''\
circuit = "half-wave"
[settings]
harmonics = 4
timeout = "1m"
tmax = "1n"
[[limit]]
metric = "dc_v"
min = 1
''')
    proc = simloop("check", "slow.toml", "toofine.toml", "--junit", "r.xml", "--store", "s.db",
                   cwd=tmp_path)
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stdout + proc.stderr
    suites = {s.get("name"): s for s in junit(tmp_path / "r.xml").findall("testsuite")}
    slow = suites["slow"].find("testcase/error")
    toofine = suites["toofine"].find("testcase/error")
    assert "no periodic steady state" in slow.get("message")
    assert toofine.get("message").startswith("dc_v at nominal: simulation failed:")
    assert {s.get("errors") for s in suites.values()} == {"1"}


def test_check_expands_patterns_and_folders(examples, tmp_path: Path) -> None:
    proc = simloop("check", "examples/*-doubler.toml", "--store", examples.store)  # quoted glob
    assert proc.returncode == 0, proc.stderr
    assert "examples/clock-comb-doubler.toml: full-wave-bridge" in proc.stdout
    assert "(0 simulated, 4 reused from the store)" in proc.stdout
    missing = simloop("check", "examples/*-nothing.toml", "--store", tmp_path / "s.db")
    assert missing.returncode == 2
    assert missing.stderr.strip() == ("simloop check: error: no design file matches "
                                      "'examples/*-nothing.toml'; check the pattern")
    folder = simloop("check", tmp_path, "--store", tmp_path / "s.db")
    assert folder.returncode == 2
    assert "holds no .toml design files" in folder.stderr
