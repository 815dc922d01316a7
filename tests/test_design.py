"""Design files: line numbers of keys, validation errors (key and line), metrics, bounds, verdicts.

No engine here: design files are validated against the built-in circuits' metadata, and verdicts
are judged on sweep points written in the tests, whose expected values are computed here from
their definitions (dBV re 1 V rms, dBc, margins), independently of simloop's code.
"""

from __future__ import annotations

import math
import tomllib
from pathlib import Path

import pytest

from simloop.design import (
    Bound,
    DesignError,
    SourceMap,
    exit_status,
    judge,
    key_label,
    load_design,
    metric_value,
    parse_metric,
)
from simloop.errors import InputError

DESIGN = "d.toml"


def write(folder: Path, text: str, name: str = DESIGN) -> Path:
    path = folder / name
    path.write_text(text, encoding="utf-8")
    return path


# ------------------------------------------------------------------------------ SourceMap
SOURCE = '''\
title = "x"   # [not a header]
description = """
fake = 1
[[limit]]
"""
circuit.name = "dotted"
'quoted key' = 2

[settings]
harmonics = 6

[corners]
rload = [
  50,   # a comment, with = sign
  100,
]
corner = [{ name = "a", vpk = 1 }, { name = "b", vpk = 2 }]

[[limit]]
metric = "dc_v"

[[limit]]
metric = "thd"
[[limit.override]]
where = { rload = 50, "v pk" = 2 }
max = 1
[[limit.override]]
corner = "a"
skip = true

[[limit]]
metric = "h2_dbc"
[limit.extra]
note = 'x'
'''


@pytest.mark.parametrize(
    ("path", "line"),
    [
        (("title",), 1),
        (("description",), 2),
        (("circuit", "name"), 6),
        (("quoted key",), 7),
        (("settings",), 9),
        (("settings", "harmonics"), 10),
        (("corners", "rload"), 13),
        (("corners", "rload", 0), 14),
        (("corners", "rload", 1), 15),
        (("corners", "corner", 1, "vpk"), 17),
        (("limit", 0), 19),
        (("limit", 0, "metric"), 20),
        (("limit", 1, "metric"), 23),
        (("limit", 1, "override", 0), 24),
        (("limit", 1, "override", 0, "where", "rload"), 25),
        (("limit", 1, "override", 0, "where", "v pk"), 25),
        (("limit", 1, "override", 0, "max"), 26),
        (("limit", 1, "override", 1, "skip"), 29),
        (("limit", 2, "metric"), 32),
        (("limit", 2, "extra", "note"), 34),
    ],
)
def test_source_map_line_exact(path, line) -> None:
    tomllib.loads(SOURCE)  # the map works on text tomllib accepts
    assert SourceMap(SOURCE).exact(path) == line


def test_source_map_skips_multiline_strings() -> None:
    m = SourceMap(SOURCE)
    assert m.exact(("fake",)) is None  # "fake = 1" is inside a multi-line string
    assert m.exact(("limit", 3)) is None  # so is the "[[limit]]" there: three limits, not four


def test_source_map_line_falls_back_to_table() -> None:
    m = SourceMap(SOURCE)
    assert m.line(("limit", 1, "min")) == 22  # missing key: the [[limit]] header
    assert m.line(("nowhere",)) == 1


def test_key_label_one_based() -> None:
    assert key_label(("limit", 1, "override", 0, "where", "v pk")) == 'limit[2].override[1].where."v pk"'
    assert key_label(("corners", "rload", 2)) == "corners.rload[3]"


# ------------------------------------------------------------------------------ validation
BASE = '''\
circuit = "half-wave"
[settings]
harmonics = 6
[corners]
rload = [50, 100]
[[limit]]
metric = "dc_v"
min = 2
'''

#: (id, file text, expected "LINE: KEY: " prefix, fragment of the problem). Line numbers are
#: those of the texts as written here.
INVALID = [
    ("toml-syntax", BASE + "[[limit]\n", "9: ", "not valid TOML"),
    ("unknown-top-key", "# design\ncolour = 1\n" + BASE, "2: colour: ", "unknown key 'colour'"),
    ("unknown-settings-key", BASE.replace("harmonics = 6", "harmonics = 6\nhamonics = 6"),
     "4: settings.hamonics: ", "unknown key 'hamonics'"),
    ("unknown-limit-key", BASE + "[[limit]]\nmetric = 'thd'\nmax = 1\nmaxi = 2\n",
     "12: limit[2].maxi: ", "unknown key 'maxi'"),
    ("unknown-override-key",
     BASE + "[[limit.override]]\nwhere = { rload = 50 }\nmin = 1\nwhen = 1\n",
     "12: limit[1].override[1].when: ", "unknown key 'when'"),
    ("missing-circuit", BASE.replace('circuit = "half-wave"\n', ""), "1: ", "missing key 'circuit'"),
    ("unknown-circuit", BASE.replace("half-wave", "quarter-wave"), "1: circuit: ",
     "no circuit 'quarter-wave'"),
    ("missing-netlist", BASE.replace('"half-wave"', '"nets/none.cir"'), "1: circuit: ",
     "netlist 'nets/none.cir' not found"),
    ("unknown-parameter", BASE + "[parameters]\nrlaod = 5\n", "10: parameters.rlaod: ",
     "has no parameter or choice 'rlaod'"),
    ("parameter-out-of-range", BASE + "[parameters]\nvpk = 5000\n", "10: parameters.vpk: ",
     "outside its range"),
    ("parameter-with-unit", BASE + "[parameters]\ncres = '10uF'\n", "10: parameters.cres: ",
     "is not a number"),
    ("choice-not-allowed", BASE + "[parameters]\ndiode = 'd1n_x'\n", "10: parameters.diode: ",
     "not an allowed model of choice diode"),
    ("unknown-metric", BASE.replace('"dc_v"', '"dc_volts"'), "7: limit[1].metric: ",
     "'dc_volts' is not a metric"),
    ("harmonic-above-settings", BASE.replace('"dc_v"', '"h7_dbv"'), "7: limit[1].metric: ",
     "needs harmonic 7 but [settings] harmonics is 6"),
    ("efficiency-other-probe",
     BASE.replace("harmonics = 6", "harmonics = 6\nprobe = 'diode_current'")
     .replace('"dc_v"', '"h2_efficiency"').replace("min = 2", "min = 0.1"),
     "8: limit[1].metric: ", "computed on the circuit's default probe only"),
    ("efficiency-without-roles",
     'circuit = "nets/hw.cir"\n[[limit]]\nmetric = "h0_efficiency"\nmin = 0.1\n',
     "3: limit[1].metric: ", "needs a circuit that names its power source"),
    ("conduction-angle-without-probes",
     'circuit = "switching-stage"\n[[limit]]\nmetric = "conduction_angle_deg"\nmax = 90\n',
     "3: limit[1].metric: ", "declares no diode current probes"),
    ("carrier-on-dbv", BASE.replace('"dc_v"', '"h2_dbv"\ncarrier = 1'), "8: limit[1].carrier: ",
     "carrier applies to hN_dbc metrics only"),
    ("carrier-equals-order", BASE.replace('"dc_v"', '"h2_dbc"\ncarrier = 2'),
     "8: limit[1].carrier: ", "0 dBc by definition"),
    ("carrier-above-harmonics", BASE.replace('"dc_v"', '"h2_dbc"\ncarrier = 9'),
     "8: limit[1].carrier: ", "must be a whole number 1..6"),
    ("h1-dbc-without-carrier", BASE.replace('"dc_v"', '"h1_dbc"'), "7: limit[1].metric: ",
     "h1_dbc is 0 dBc by definition"),
    ("no-bound", BASE.replace("min = 2\n", ""), "6: limit[1]: ", "no bound for dc_v"),
    ("min-above-max", BASE + "max = 1\n", "8: limit[1].min: ", "min 2 is above max 1"),
    ("bound-not-a-number", BASE.replace("min = 2", "min = 'two'"), "8: limit[1].min: ",
     "'two' is not a number"),
    ("bound-boolean", BASE.replace("min = 2", "min = true"), "8: limit[1].min: ",
     "must be a number"),
    ("bound-negative-ripple", BASE.replace('"dc_v"', '"ripple_v"').replace("min = 2", "max = -1"),
     "8: limit[1].max: ", "ripple_v is never negative"),
    ("efficiency-in-percent", BASE.replace('"dc_v"', '"h0_efficiency"').replace("min = 2", "min = 40"),
     "8: limit[1].min: ", "is a fraction 0..1"),
    ("corner-axis-empty", BASE.replace("[50, 100]", "[]"), "5: corners.rload: ",
     "must be a non-empty array"),
    ("corner-axis-not-array", BASE.replace("[50, 100]", "50"), "5: corners.rload: ",
     "must be a non-empty array"),
    ("corner-value-repeated", BASE.replace("[50, 100]", "[50, 100, '50']"),
     "5: corners.rload[3]: ", "the value 50 is listed twice"),
    ("corner-value-out-of-range", BASE.replace("[50, 100]", "[\n  50,\n  1e9,\n]"),
     "7: corners.rload[2]: ", "outside its range"),
    ("fixed-and-varied", BASE + "[parameters]\nrload = 10\n", "5: corners.rload: ",
     "rload is fixed in [parameters] and varied here"),
    ("grid-and-list-overlap", BASE + "[[corner]]\nname = 'hot'\nrload = 10\n",
     "11: corner[1].rload: ", "rload is varied by [corners] and set here"),
    ("corner-sets-nothing", BASE + "[[corner]]\nname = 'hot'\n", "9: corner[1]: ",
     "must set at least one parameter or choice"),
    ("corner-name-twice", BASE + "[[corner]]\nname = 'hot'\nvpk = 10\n"
                                 "[[corner]]\nname = 'hot'\nvpk = 11\n",
     "13: corner[2].name: ", "corner name 'hot' is used twice"),
    ("override-selects-nothing", BASE + "[[limit.override]]\nmin = 1\n",
     "9: limit[1].override[1]: ", "needs where = { NAME = VALUE }"),
    ("override-without-bound", BASE + "[[limit.override]]\nwhere = { rload = 50 }\n",
     "9: limit[1].override[1]: ", "needs min, max or skip = true"),
    ("override-skip-and-bound", BASE + "[[limit.override]]\nwhere = { rload = 50 }\nskip = true\nmin = 1\n",
     "11: limit[1].override[1].skip: ", "contradict"),
    ("override-unknown-name", BASE + "[[limit.override]]\nwhere = { rlod = 50 }\nmin = 1\n",
     "10: limit[1].override[1].where.rlod: ", "has no parameter or choice 'rlod'"),
    ("override-unknown-corner", BASE + "[[limit.override]]\ncorner = 'hot'\nmin = 1\n",
     "10: limit[1].override[1].corner: ", "no [[corner]] named 'hot'"),
    ("override-matches-no-corner", BASE + "[[limit.override]]\nwhere = { rload = 60 }\nmin = 1\n",
     "9: limit[1].override[1]: ", "matches no corner"),
    ("override-inverts-range", BASE + "max = 5\n[[limit.override]]\nwhere = { rload = 50 }\nmin = 6\n",
     "12: limit[1].override[1].min: ", "min 6 above max 5"),
    ("harmonics-not-whole", BASE.replace("harmonics = 6", "harmonics = 6.5"),
     "3: settings.harmonics: ", "must be a whole number 1..1000"),
    ("resample-unknown", BASE.replace("harmonics = 6", "harmonics = 6\nresample = 'cubic'"),
     "4: settings.resample: ", "'cubic' is not one of"),
    ("probe-unknown", BASE.replace("harmonics = 6", "harmonics = 6\nprobe = 'v(nowhere)'"),
     "4: settings.probe: ", "nowhere"),
    ("max-periods-too-few", BASE.replace("harmonics = 6", "harmonics = 6\nmax_periods = 5"),
     "4: settings.max_periods: ", "must be a whole number 12.."),
    ("tolerance-not-positive", BASE.replace("harmonics = 6", "harmonics = 6\ntolerance = 0"),
     "4: settings.tolerance: ", "must be > 0"),
    ("settings-not-table", BASE.replace("[settings]\nharmonics = 6\n", "settings = 6\n"),
     "2: settings: ", "must be a table"),
    ("limit-not-array-of-tables", 'circuit = "half-wave"\nlimit = 5\n', "2: limit: ",
     "must be an array of tables"),
    ("no-limits", 'circuit = "half-wave"\n', "1: ", "no [[limit]] section"),
    ("limit-name-twice", BASE + "name = 'rail'\n[[limit]]\nname = 'rail'\nmetric = 'rms_v'\nmin = 1\n",
     "11: limit[2].name: ", "limit name 'rail' is used twice"),
]


@pytest.mark.parametrize(("text", "prefix", "fragment"), [c[1:] for c in INVALID],
                         ids=[c[0] for c in INVALID])
def test_load_design_error_names_key_and_line(tmp_path: Path, text: str, prefix: str,
                                              fragment: str) -> None:
    user_netlist(tmp_path)
    path = write(tmp_path, text)
    with pytest.raises(DesignError) as info:
        load_design(path)
    message = str(info.value)
    assert message.startswith(f"{path}:{prefix}"), message
    assert fragment in message, message
    assert "\n" not in message
    assert isinstance(info.value, InputError)


def user_netlist(folder: Path) -> Path:
    """``nets/hw.cir``: a half-wave rectifier netlist without metadata (no ideal, no roles)."""
    (folder / "nets").mkdir(exist_ok=True)
    path = folder / "nets" / "hw.cir"
    path.write_text("* user rectifier\nVs in 0 SIN(0 5 50)\nD1 in out dx\nRload out 0 1k\n"
                    ".model dx D(IS=1e-14)\n.end\n")
    return path


def test_load_design_missing_file_names_it(tmp_path: Path) -> None:
    with pytest.raises(DesignError, match=r"none\.toml: no such design file"):
        load_design(tmp_path / "none.toml")


def test_load_design_user_netlist_delta_without_ideal(tmp_path: Path) -> None:
    user_netlist(tmp_path)
    path = write(tmp_path, 'circuit = "nets/hw.cir"\n[[limit]]\nmetric = "h2_delta_db"\nmax = 1\n')
    with pytest.raises(DesignError) as info:
        load_design(path)
    assert str(info.value).startswith(f"{path}:3: limit[1].metric: ")
    assert "needs an ideal counterpart" in str(info.value)
    # The same netlist with an ideal kind given in [settings] is accepted.
    write(tmp_path, 'circuit = "nets/hw.cir"\n[settings]\nideal = "half-wave"\n'
                    '[[limit]]\nmetric = "h2_delta_db"\nmax = 1\n')
    assert load_design(path).template.name == "hw"


def test_load_design_refused_netlist_names_circuit_line(tmp_path: Path) -> None:
    (tmp_path / "bad.cir").write_text("* bad\nVs in 0 SIN(0 1 50)\nR1 in 0 1k\n.control\nrun\n.endc\n")
    path = write(tmp_path, '# a comment\ncircuit = "bad.cir"\n[[limit]]\nmetric = "dc_v"\nmin = 0\n')
    with pytest.raises(DesignError) as info:
        load_design(path)
    assert str(info.value).startswith(f"{path}:2: circuit: ")
    assert ".control" in str(info.value)


# ------------------------------------------------------------------------------ corners
def test_load_design_grid_times_list(tmp_path: Path) -> None:
    path = write(tmp_path, '''\
circuit = "half-wave"
[parameters]
cres = "100u"
[corners]
rload = [50, "1k"]
[[corner]]
name = "cold"
diode = "sl_rect1a"
[[corner]]
name = "hot"
diode = "SL_Schottky"
rsrc = 1
[[limit]]
metric = "dc_v"
min = 1
''')
    d = load_design(path)
    assert [c.name for c in d.corners] == ["cold rload=50", "cold rload=1k", "hot rload=50",
                                           "hot rload=1k"]
    assert dict(d.corners[3].values) == {"diode": "sl_schottky", "rsrc": 1.0, "rload": 1000.0}
    assert d.corners[0].full["cres"] == 1e-4 and d.corners[0].full["vpk"] == 12.0  # fixed, default
    assert dict(d.fixed_values) == {"cres": 1e-4}


def test_load_design_no_corners_is_nominal(tmp_path: Path) -> None:
    d = load_design(write(tmp_path, 'circuit = "half-wave"\n[[limit]]\nmetric = "thd"\nmax = 1\n'))
    assert [(c.name, dict(c.values)) for c in d.corners] == [("nominal", {})]
    assert d.settings.harmonics == 10  # the simloop run default


def test_load_design_settings_reach_run_settings(tmp_path: Path) -> None:
    d = load_design(write(tmp_path, '''\
circuit = "half-wave"
[settings]
harmonics = 4
tolerance = "1e-7"
max_periods = 300
tmax = "5u"
timeout = 30
resample = "linear"
steady = "settle"
fundamental = 50
amplitude = "12"
ideal = "half-wave"
probe = "v(out)"
[[limit]]
metric = "h4_v"
max = 1
'''))
    s = d.settings
    assert (s.harmonics, s.method, s.ideal_kind, s.fundamental_hz, s.amplitude, s.probe) == (
        4, "linear", "half-wave", 50.0, 12.0, "v(out)")
    assert (s.steady.tolerance, s.steady.max_periods, s.steady.tmax, s.steady.timeout,
            s.steady.method) == (1e-7, 300, 5e-6, 30.0, "settle")


# ------------------------------------------------------------------------------ metrics
def test_parse_metric_names() -> None:
    assert parse_metric("h12_delta_db").order == 12
    assert parse_metric("h0_efficiency").form == "efficiency"
    assert (parse_metric("thd").unit, parse_metric("h3_dbv").margin_unit) == ("1", "dB")
    with pytest.raises(InputError, match="'h2_db' is not a metric"):
        parse_metric("h2_db")


def point(amplitudes, *, metrics=None, deltas=None, status="ok"):
    """A sweep point with the given simulated amplitudes A_0..A_N [V]."""
    rows = [{"n": n, "sim_v": a, "delta_db": (deltas or {}).get(n)} for n, a in enumerate(amplitudes)]
    return {"status": status, "error": None if status == "ok" else "engine said no",
            "metrics": metrics or {}, "harmonics": rows, "parameters": {}, "choices": {}}


AMPS = [3.1, 5.2, 2.4, 0.0, 0.47]


@pytest.mark.parametrize(
    ("name", "expected"),
    [
        # dBV re 1 V rms: an n >= 1 sinusoid of peak A has rms A / sqrt 2; DC has rms |A0|
        # (common practice).
        ("h1_dbv", 20 * math.log10(5.2 / math.sqrt(2))),
        ("h4_dbv", 20 * math.log10(0.47 / math.sqrt(2))),
        ("h0_dbv", 20 * math.log10(3.1)),
        # dBc = 20 log10(A_n / A_1) (common practice).
        ("h2_dbc", 20 * math.log10(2.4 / 5.2)),
        ("h0_dbc", 20 * math.log10(3.1 / 5.2)),
        ("h2_v", 2.4),
        ("h0_v", 3.1),
        ("h3_dbv", -math.inf),
        ("h3_dbc", -math.inf),
    ],
)
def test_metric_value_levels(name: str, expected: float) -> None:
    value, reason = metric_value(parse_metric(name), point(AMPS))
    assert reason == ""
    if math.isinf(expected):
        assert value == expected
    else:
        assert value == pytest.approx(expected, rel=1e-12, abs=1e-12)


def test_metric_value_dbc_other_carrier() -> None:
    from simloop.design import Metric

    value, _ = metric_value(Metric("h4_dbc", "dbc", 4, carrier=2), point(AMPS))
    assert value == pytest.approx(20 * math.log10(0.47 / 2.4), rel=1e-12)


@pytest.mark.parametrize(
    ("name", "pt", "fragment"),
    [
        ("thd", point(AMPS, metrics={"thd": None}), "has no fundamental"),
        ("h2_dbc", point([6.37, 1e-13, 4.24, 0.0, 0.85]), "the fundamental is absent"),
        ("h3_delta_db", point(AMPS, deltas={2: -0.5}), "the ideal harmonic 3 is zero"),
        ("h2_efficiency", point(AMPS), "no conversion efficiency"),
        ("conduction_angle_deg", point(AMPS), "reports no conduction_angle_deg"),
    ],
)
def test_metric_value_not_available(name: str, pt, fragment: str) -> None:
    value, reason = metric_value(parse_metric(name), pt)
    assert value is None
    assert reason.startswith("not available") and fragment in reason


def test_metric_value_scalars_and_efficiency() -> None:
    pt = point(AMPS, metrics={"dc_v": 3.1, "rms_v": 4.9, "ripple_v": 9.8, "thd": 0.47,
                              "efficiency": {"0": 0.3, "2": 0.09}}, deltas={2: -0.25})
    got = {name: metric_value(parse_metric(name), pt)[0]
           for name in ("dc_v", "rms_v", "ripple_v", "thd", "h0_efficiency", "h2_efficiency",
                        "h2_delta_db")}
    assert got == {"dc_v": 3.1, "rms_v": 4.9, "ripple_v": 9.8, "thd": 0.47, "h0_efficiency": 0.3,
                   "h2_efficiency": 0.09, "h2_delta_db": -0.25}


# ------------------------------------------------------------------------------ bounds
@pytest.mark.parametrize(
    ("bound", "value", "margin"),
    [
        (Bound(min=4.75), 5.0, 0.25),  # >=: value - bound
        (Bound(max=-14.0), -12.5, -1.5),  # <=: bound - value
        (Bound(min=4.75, max=5.25), 5.2, 0.05),  # range: the nearer side
        (Bound(min=4.75, max=5.25), 4.5, -0.25),
        (Bound(max=-10.0), -math.inf, math.inf),
    ],
)
def test_bound_margin(bound: Bound, value: float, margin: float) -> None:
    assert bound.margin(value) == pytest.approx(margin, rel=1e-12, abs=1e-12)


# ------------------------------------------------------------------------------ verdicts
ALL_KINDS = '''\
circuit = "half-wave"
[settings]
harmonics = 4
[corners]
rload = [50, 100]
[[limit]]
metric = "dc_v"
min = 3.0
[[limit]]
metric = "rms_v"
max = 5
[[limit]]
metric = "ripple_v"
max = 10
[[limit]]
metric = "thd"
max = 0.45
[[limit]]
metric = "h2_v"
min = "2.5"
[[limit]]
metric = "h1_dbv"
min = 11.0
max = 12.0
[[limit]]
metric = "h4_dbc"
max = -20
[[limit]]
metric = "h4_dbc"
carrier = 2
max = -14
[[limit]]
metric = "h2_delta_db"
min = -0.3
[[limit]]
metric = "h2_efficiency"
min = 0.1
[[limit.override]]
where = { rload = 100 }
min = 0.05
[[limit]]
metric = "conduction_angle_deg"
max = 180
[[limit.override]]
where = { rload = 50 }
skip = true
'''


def corner_points():
    """Two points: rload = 50 and rload = 100 (invented figures)."""
    a = [3.4, 5.44, 2.48, 0.15, 0.48]
    b = [3.44, 5.49, 2.50, 0.14, 0.30]
    return [
        point(a, metrics={"dc_v": 3.4, "rms_v": 5.1, "ripple_v": 10.9, "thd": 0.467,
                          "efficiency": {"2": 0.094}, "conduction_angle_deg": 171.0},
              deltas={2: -0.226}),
        point(b, metrics={"dc_v": 3.44, "rms_v": 4.9, "ripple_v": 9.9, "thd": 0.43,
                          "efficiency": {"2": 0.0946}, "conduction_angle_deg": 181.0},
              deltas={2: -0.175}),
    ]


def expected_value(metric: str, carrier: int, pt) -> float:
    """Each metric from its definition, on the point's own rows (common practice)."""
    a = [r["sim_v"] for r in pt["harmonics"]]
    if metric.startswith("h") and metric[1].isdigit():
        n = int(metric[1:].split("_")[0])
        form = metric.split("_", 1)[1]
        if form == "v":
            return a[n]
        if form == "dbv":
            return 20 * math.log10(a[n] / math.sqrt(2))
        if form == "dbc":
            return 20 * math.log10(a[n] / a[carrier])
        if form == "delta_db":
            return pt["harmonics"][n]["delta_db"]
        return pt["metrics"]["efficiency"][str(n)]
    return pt["metrics"][metric]


def test_judge_every_metric_kind(tmp_path: Path) -> None:
    design = load_design(write(tmp_path, ALL_KINDS))
    raw = tomllib.loads(ALL_KINDS)["limit"]
    points = corner_points()
    verdicts = judge(design, points)
    # 11 limits x 2 corners, less the conduction-angle limit skipped at rload = 50.
    assert len(verdicts) == 21
    for v in verdicts:
        k = next(i for i, lim in enumerate(design.limits) if lim.label == v.limit)
        spec = raw[k]
        ci = 0 if v.corner == "rload=50" else 1
        value = expected_value(spec["metric"], spec.get("carrier", 1), points[ci])
        lo, hi = spec.get("min"), spec.get("max")
        for ov in spec.get("override", []):
            if ov["where"]["rload"] == (50, 100)[ci]:
                lo, hi = ov.get("min", lo), ov.get("max", hi)
        lo = None if lo is None else float(lo)
        sides = ([value - lo] if lo is not None else []) + ([hi - value] if hi is not None else [])
        margin = min(sides)  # >=: value - bound; <=: bound - value; a range: the nearer side
        assert v.value == pytest.approx(value, rel=1e-12), v
        assert v.margin == pytest.approx(margin, rel=1e-9, abs=1e-12), v
        assert v.status == ("pass" if margin >= 0 else "fail"), v
    statuses = [v.status for v in verdicts]
    assert statuses == sorted(statuses, key=["fail", "error", "pass"].index)  # failures first
    assert "fail" in statuses and "pass" in statuses
    assert exit_status([_outcome(design, verdicts)]) == 1


def _outcome(design, verdicts):
    from simloop.design import DesignOutcome

    return DesignOutcome(design=design, verdicts=tuple(verdicts))


def test_judge_failed_and_unconverged_points_are_errors(tmp_path: Path) -> None:
    design = load_design(write(tmp_path, BASE))
    pts = [point(AMPS, status="failed"), point(AMPS, status="unconverged")]
    verdicts = judge(design, pts)
    assert [v.status for v in verdicts] == ["error", "error"]
    assert verdicts[0].reason == "simulation failed: engine said no"
    assert verdicts[1].reason == "engine said no"
    assert exit_status([_outcome(design, verdicts)]) == 2


def test_judge_not_available_is_error(tmp_path: Path) -> None:
    design = load_design(write(tmp_path, BASE.replace('"dc_v"', '"thd"').replace("min = 2", "max = 1")))
    verdicts = judge(design, [point(AMPS, metrics={"thd": None}), point(AMPS, metrics={"thd": 0.4})])
    assert [v.status for v in verdicts] == ["error", "pass"]
    assert verdicts[0].value is None and verdicts[0].margin is None
    assert exit_status([_outcome(design, verdicts)]) == 2


def test_judge_override_order_and_corner_name(tmp_path: Path) -> None:
    design = load_design(write(tmp_path, '''\
circuit = "half-wave"
[corners]
rload = [50, 100]
[[corner]]
name = "low line"
vpk = 10
[[corner]]
name = "high line"
vpk = 14
[[limit]]
metric = "dc_v"
min = 3
max = 4
[[limit.override]]
corner = "high line"
max = 5
[[limit.override]]
corner = "high line"
where = { rload = 100 }
min = 3.5
'''))
    bounds = {c.name: design.limits[0].bound_at(c) for c in design.corners}
    assert bounds == {"low line rload=50": Bound(3.0, 4.0), "low line rload=100": Bound(3.0, 4.0),
                      "high line rload=50": Bound(3.0, 5.0),
                      "high line rload=100": Bound(3.5, 5.0)}  # later overrides on top


def test_exit_status_order() -> None:
    assert exit_status([]) == 0


def test_load_design_module_example_is_valid(tmp_path: Path) -> None:
    import simloop.design

    doc = simloop.design.__doc__
    block = doc.split("A complete example::\n", 1)[1].split("\nKeys\n", 1)[0]
    text = "\n".join(line[4:] for line in block.splitlines())
    d = load_design(write(tmp_path, text))
    assert [c.name for c in d.corners] == ["rload=50 vpk=8.1", "rload=50 vpk=9.9",
                                           "rload=100 vpk=8.1", "rload=100 vpk=9.9"]
    assert [lim.bound_at(d.corners[0]) for lim in d.limits] == [Bound(6.0, 9.5), Bound(None, 1.5)]
    assert d.limits[1].bound_at(d.corners[2]) == Bound(None, 1.2)
