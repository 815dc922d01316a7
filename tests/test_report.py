"""Tidy sweep CSV: row layout, header units, exact round trip, levels recomputed here.

The points are synthetic dicts shaped like a sweep's (no engine). Their amplitudes follow the
ideal half-wave series of a drive A cos wt (DC A/pi, A_1 = A/2, even n: 2A/(pi (n^2 - 1)), odd
n >= 3: 0; Spiegel, Mathematical Handbook of Formulas and Tables, Fourier series table
[from memory]) scaled down a little to stand in for a simulation.
"""

from __future__ import annotations

import csv
import doctest
import math
from pathlib import Path

import pytest

from simloop import report
from simloop.errors import InputError
from simloop.report import (
    dbc_reference_order,
    format_cell,
    sweep_csv_columns,
    sweep_csv_rows,
    unit_suffix,
    write_sweep_csv,
)

HARMONICS = 5  # rows n = 0..5 per point


def _half_wave(a: float, n: int) -> float:
    if n == 0:
        return a / math.pi
    if n == 1:
        return a / 2.0
    return 0.0 if n % 2 else 2.0 * a / (math.pi * (n * n - 1))


def _full_wave(a: float, n: int) -> float:
    if n == 0:
        return 2.0 * a / math.pi
    return 0.0 if n % 2 else 4.0 * a / (math.pi * (n * n - 1))


def _point(index, varied, *, status="ok", series=_half_wave, scale=0.93, choices=None):
    """A sweep point; status 'failed' gives null harmonics and metrics, as a sweep records it."""
    vpk = float(varied.get("vpk", 5.0))
    base = {
        "index": index,
        "parameters": {"rload": 1e3, "vpk": 5.0, **{k: v for k, v in varied.items()
                                                   if not isinstance(v, str)}},
        "varied": dict(varied),
        "choices": dict(choices or {}),
        "reused": False,
    }
    if status == "failed":
        return {**base, "status": "failed", "error": "engine: timestep too small, at t = 1.2 ms",
                "steady_state": None, "metrics": None, "harmonics": None}
    rows = []
    for n in range(HARMONICS + 1):
        ideal = series(vpk, n)
        sim = scale * ideal + (1e-4 * vpk / n if n % 2 and n > 1 else 0.0)
        rows.append({
            "n": n, "freq_hz": 50.0 * n, "ideal_v": ideal, "ideal_phase_deg": 0.0,
            "estimate_v": None if n > 2 else 0.95 * ideal,
            "sim_v": sim, "sim_phase_deg": 1.0 / 3.0 * n,
            "delta_db": 20.0 * math.log10(sim / ideal) if ideal > 0 else None,
            "estimate_delta_db": None,
        })
    return {**base, "status": status,
            "error": None if status == "ok" else "no periodic steady state within 200 periods",
            "steady_state": {"periods": 12},
            "metrics": {"dc_v": rows[0]["sim_v"], "rms_v": 0.93 * vpk / 2.0,
                        "ripple_v": 0.93 * vpk, "thd": None if series is _full_wave else 0.4352},
            "harmonics": rows}


@pytest.fixture
def points():
    """rload x vpk grid of 2 x 2, one point failed and one unconverged."""
    grid = [(100.0, 5.0), (100.0, 10.0), (1e3, 5.0), (1e3, 10.0)]
    statuses = ["ok", "failed", "unconverged", "ok"]
    return [_point(i, {"rload": r, "vpk": v}, status=s)
            for i, ((r, v), s) in enumerate(zip(grid, statuses))]


def _read(path: Path) -> tuple[list[str], list[dict[str, str]]]:
    with path.open(newline="", encoding="utf-8") as fh:
        reader = csv.DictReader(fh)
        return list(reader.fieldnames or []), list(reader)


# --------------------------------------------------------------------------- rows
def test_sweep_csv_rows_count(points):
    rows = sweep_csv_rows(points, ["rload", "vpk"])
    with_harmonics = sum(len(p["harmonics"]) for p in points if p["harmonics"])
    failed = sum(1 for p in points if p["status"] == "failed")
    assert len(rows) == with_harmonics + failed == 3 * (HARMONICS + 1) + 1
    assert [r["point"] for r in rows] == [0] * 6 + [1] + [2] * 6 + [3] * 6


def test_sweep_csv_rows_failed_point_one_row(points):
    rows = [r for r in sweep_csv_rows(points, ["rload", "vpk"]) if r["point"] == 1]
    assert len(rows) == 1
    row = rows[0]
    assert row["status"] == "failed"
    assert row["error"] == "engine: timestep too small, at t = 1.2 ms"
    assert (row["rload"], row["vpk"]) == (100.0, 10.0)
    for column in (*report.HARMONIC_COLUMNS, *report.METRIC_COLUMNS):
        assert row[column] is None, column


def test_sweep_csv_rows_unconverged_keeps_harmonics(points):
    rows = [r for r in sweep_csv_rows(points, ["rload", "vpk"]) if r["point"] == 2]
    assert [r["n"] for r in rows] == list(range(HARMONICS + 1))
    assert {r["status"] for r in rows} == {"unconverged"}
    assert rows[0]["error"].startswith("no periodic steady state")


def test_sweep_csv_rows_metrics_repeated(points):
    rows = [r for r in sweep_csv_rows(points, ["rload", "vpk"]) if r["point"] == 3]
    metrics = points[3]["metrics"]
    for r in rows:
        assert (r["dc_v"], r["rms_v"], r["ripple_v"], r["thd"]) == (
            metrics["dc_v"], metrics["rms_v"], metrics["ripple_v"], metrics["thd"])


def test_sweep_csv_rows_bad_status(points):
    points[2]["status"] = "done"
    with pytest.raises(InputError, match="status 'done'"):
        sweep_csv_rows(points, ["rload", "vpk"])


def test_sweep_csv_rows_missing_swept_value(points):
    with pytest.raises(InputError, match="no value for the swept name 'cres'"):
        sweep_csv_rows(points, ["rload", "cres"])


# --------------------------------------------------------------------------- header
def test_write_sweep_csv_header_units(points, tmp_path):
    path = tmp_path / "sweep.csv"
    write_sweep_csv(path, points, ["rload", "vpk"], units={"rload": "ohm", "vpk": "V"})
    header, _ = _read(path)
    assert header == [
        "point", "rload_ohm", "vpk_v", "status", "error", "n", "freq_hz", "ideal_v",
        "estimate_v", "sim_v", "sim_dbv", "sim_dbc", "sim_phase_deg", "delta_db", "dc_v",
        "rms_v", "ripple_v", "thd",
    ]


def test_write_sweep_csv_header_without_units(points, tmp_path):
    path = tmp_path / "plain.csv"
    write_sweep_csv(path, points, ["rload", "vpk"])
    header, _ = _read(path)
    assert header[:3] == ["point", "rload", "vpk"]


def test_sweep_csv_columns_model_choice_plain():
    pts = [_point(0, {"diode": "sl_schottky", "freq": 1e3}, choices={"diode": "sl_schottky"})]
    rows = sweep_csv_rows(pts, ["diode", "freq"], units={"diode": "V", "freq": "Hz"})
    # the swept frequency would be "freq_hz", the harmonic frequency's column: it is prefixed
    assert list(rows[0])[:3] == ["point", "diode", "param_freq_hz"]
    assert rows[0]["diode"] == "sl_schottky" and rows[0]["param_freq_hz"] == 1e3


def test_sweep_csv_columns_repeated_name():
    with pytest.raises(InputError, match="repeat a name"):
        sweep_csv_columns(["rload", "rload"])
    with pytest.raises(InputError, match="twice"):
        sweep_csv_columns(["rload", "rload_ohm"], units={"rload": "ohm"})


def test_unit_suffix_spellings():
    assert [unit_suffix(u) for u in ("ohm", "Ω", "V", "Hz", "F", "1", "")] == [
        "ohm", "ohm", "v", "hz", "f", "", ""]


# --------------------------------------------------------------------------- values
def test_write_sweep_csv_round_trip_exact(tmp_path):
    awkward = [0.1 + 0.2, 1.0 / 3.0, 2.0 ** -1074, 1.7976931348623157e308, 123456789.12345679,
               -0.0, 6.02214076e23]
    pts = []
    for i, value in enumerate(awkward):
        p = _point(i, {"rload": value if value > 0 else 1.0, "vpk": 5.0})
        p["harmonics"][1]["sim_v"] = abs(value)
        p["harmonics"][1]["sim_phase_deg"] = value
        p["metrics"]["rms_v"] = value
        pts.append(p)
    path = tmp_path / "exact.csv"
    write_sweep_csv(path, pts, ["rload", "vpk"], units={"rload": "ohm", "vpk": "V"})
    _, rows = _read(path)
    for p, value in zip(pts, awkward):
        mine = [r for r in rows if int(r["point"]) == p["index"]]
        h1 = next(r for r in mine if r["n"] == "1")
        assert float(h1["sim_v"]) == abs(value)
        assert float(h1["sim_phase_deg"]) == value
        assert math.copysign(1.0, float(h1["sim_phase_deg"])) == math.copysign(1.0, value)
        assert float(h1["rms_v"]) == value
        assert float(h1["rload_ohm"]) == p["varied"]["rload"]
        for r, h in zip(mine, p["harmonics"]):
            assert float(r["ideal_v"]) == h["ideal_v"]
            assert float(r["freq_hz"]) == h["freq_hz"]


def test_write_sweep_csv_none_is_empty(points, tmp_path):
    path = tmp_path / "none.csv"
    write_sweep_csv(path, points, ["rload", "vpk"])
    _, rows = _read(path)
    failed = [r for r in rows if r["status"] == "failed"]
    assert len(failed) == 1
    for column in (*report.HARMONIC_COLUMNS, *report.METRIC_COLUMNS):
        assert failed[0][column] == "", column
    ok = [r for r in rows if r["point"] == "0"]
    assert [r["estimate_v"] == "" for r in ok] == [False, False, False, True, True, True]
    assert {r["error"] for r in ok} == {""}
    # odd orders of a half-wave have no ideal level to compare with: no delta
    assert [r["delta_db"] == "" for r in ok] == [False, False, False, True, False, True]


def test_write_sweep_csv_error_text_quoted(points, tmp_path):
    points[1]["error"] = 'engine said "singular matrix", node out, then quit'
    path = tmp_path / "quoted.csv"
    write_sweep_csv(path, points, ["rload", "vpk"])
    _, rows = _read(path)
    assert rows[6]["error"] == 'engine said "singular matrix", node out, then quit'


def test_write_sweep_csv_sim_dbv_recomputed(points, tmp_path):
    path = tmp_path / "levels.csv"
    write_sweep_csv(path, points, ["rload", "vpk"])
    _, rows = _read(path)
    checked = 0
    for r in rows:
        if r["n"] == "":
            continue
        a = float(r["sim_v"])
        # dBV re 1 V rms: a sinusoid of peak A has rms A/sqrt(2); DC's rms is |A0| (common practice)
        if r["n"] == "0":
            expected = 20.0 * math.log10(abs(a))
        else:
            expected = 20.0 * math.log10(a / math.sqrt(2.0))
        assert float(r["sim_dbv"]) == pytest.approx(expected, rel=1e-14, abs=1e-13)
        checked += 1
    assert checked == 18


def test_write_sweep_csv_sim_dbc_re_fundamental(points, tmp_path):
    path = tmp_path / "dbc.csv"
    write_sweep_csv(path, points, ["rload", "vpk"])
    _, rows = _read(path)
    for point in ("0", "2", "3"):
        mine = {int(r["n"]): r for r in rows if r["point"] == point}
        a1 = float(mine[1]["sim_v"])
        assert float(mine[1]["sim_dbc"]) == 0.0
        for n, r in mine.items():
            # dBc: level re the carrier (the fundamental), 20 log10(A_n / A_1) (common practice)
            expected = 20.0 * math.log10(abs(float(r["sim_v"])) / a1)
            assert float(r["sim_dbc"]) == pytest.approx(expected, rel=1e-14, abs=1e-13)


def test_write_sweep_csv_sim_dbc_full_wave(tmp_path):
    pts = [_point(i, {"vpk": v}, series=_full_wave) for i, v in enumerate((2.0, 8.0))]
    for p in pts:
        p["harmonics"][1]["sim_v"] = 3e-13  # the fundamental of a bridge output: rounding noise
        p["harmonics"][3]["sim_v"] = 0.0
    path = tmp_path / "full.csv"
    write_sweep_csv(path, pts, ["vpk"], units={"vpk": "V"})
    _, rows = _read(path)
    for point in ("0", "1"):
        mine = {int(r["n"]): r for r in rows if r["point"] == point}
        a2 = float(mine[2]["sim_v"])
        assert float(mine[2]["sim_dbc"]) == 0.0  # the reference row names the reference
        expected = 20.0 * math.log10(float(mine[4]["sim_v"]) / a2)
        assert float(mine[4]["sim_dbc"]) == pytest.approx(expected, rel=1e-14)
        # full-wave: A4/A2 = (2^2 - 1)/(4^2 - 1) = 1/5 (series of |cos|, Spiegel [from memory])
        assert float(mine[4]["sim_dbc"]) == pytest.approx(20.0 * math.log10(0.2), rel=1e-12)
        assert mine[3]["sim_dbc"] == "-inf"  # a zero amplitude: no level at all
        assert mine[0]["thd"] == ""


def test_write_sweep_csv_atomic_no_leftovers(points, tmp_path):
    path = tmp_path / "out" / "sweep.csv"
    write_sweep_csv(path, points, ["rload", "vpk"])
    write_sweep_csv(path, points[:1], ["rload", "vpk"])  # overwrite in place
    assert [p.name for p in path.parent.iterdir()] == ["sweep.csv"]
    _, rows = _read(path)
    assert len(rows) == HARMONICS + 1


def test_write_sweep_csv_unwritable(points, tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    with pytest.raises(InputError, match="cannot write"):
        write_sweep_csv(blocker / "sweep.csv", points, ["rload", "vpk"])


def test_write_sweep_csv_no_points(tmp_path):
    path = tmp_path / "empty.csv"
    write_sweep_csv(path, [], ["rload"], units={"rload": "ohm"})
    assert path.read_text(encoding="utf-8").splitlines()[0].startswith("point,rload_ohm,status")
    assert len(path.read_text(encoding="utf-8").splitlines()) == 1


# --------------------------------------------------------------------------- helpers
def test_dbc_reference_order_cases():
    half = [_point(0, {"vpk": 5.0})]
    full = [_point(0, {"vpk": 5.0}, series=_full_wave)]
    failed = [_point(0, {"vpk": 5.0}, status="failed")]
    assert dbc_reference_order(half) == 1
    assert dbc_reference_order(full) == 2  # A_1 = 0 exactly: largest AC order is n = 2
    assert dbc_reference_order(failed) is None
    assert dbc_reference_order(half + full) == 2  # one point without fundamental decides


def test_format_cell_cases():
    assert format_cell(None) == ""
    assert format_cell(0.1) == "0.1" and float(format_cell(1 / 7)) == 1 / 7
    assert format_cell(7) == "7"
    assert format_cell(float("-inf")) == "-inf"
    assert format_cell("sl_rect1a, 1 A") == "sl_rect1a, 1 A"  # text as it is (csv quotes it)
    assert format_cell(True) == "true"


def test_report_module_examples():
    result = doctest.testmod(report, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted >= 8 and result.failed == 0
