"""HTML reports: structure (Python's html.parser), escaping, numbers, and a real browser render.

The documents are synthetic, shaped like the JSON the commands write; no engine runs. The harmonic
amplitudes are the published Fourier series of a half-wave rectified cosine of 10 V peak (Spiegel,
*Mathematical Handbook of Formulas and Tables*, Fourier series table [from memory]: a0 = A/pi,
a1 = A/2, a2 = 0.212207 A, odd n >= 3 zero), so the figures the report shows can be checked
against the table's own digits.

The browser tests render the written file in Debian's chromium (``/usr/bin/chromium``, package
``chromium``, listed in packaging/debian-test-packages.txt): ``--dump-dom`` gives the DOM the
browser built, ``--screenshot`` what it painted. Each embedded figure is a block of one pure
colour, so finding that colour in the screenshot shows the browser decoded and painted that
image; the report has no script to ask it. Without chromium the browser tests skip, except under
CI=true, where they fail (as the engine tests do, tests/conftest.py).
"""

from __future__ import annotations

import base64
import math
import os
import shutil
import subprocess
from dataclasses import dataclass, field
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from simloop.errors import InputError
from simloop.html_report import (
    CAUTION_POINTS,
    DASH,
    breakdown_table,
    check_report,
    figure_png,
    format_db,
    format_eng,
    run_report,
    sweep_report,
    write_report,
)

# The lead registers the "browser" marker in pyproject.toml; until then no marker is applied
# (--strict-markers would reject it) and the browser tests gate themselves (require_chromium).
pytestmark: list = []

CHROMIUM = "/usr/bin/chromium"
CHROMIUM_HINT = ("sudo apt-get install -y chromium (it is listed in "
                 "packaging/debian-test-packages.txt; bash bootstrap.sh test installs it)")
HOSTILE = "<script>alert(1)</script>"
PEAK_V = 10.0  # drive amplitude of the synthetic half-wave [V]
MAGENTA = (255, 0, 255)
CYAN = (0, 255, 255)
FIG_INCHES, FIG_DPI = (3.0, 1.5), 100  # -> 300 x 150 px


# ---------------------------------------------------------------- a small DOM from html.parser
VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source",
        "track", "wbr"}


@dataclass
class Node:
    tag: str
    attrs: dict[str, str | None]
    parent: Node | None = None
    children: list[Any] = field(default_factory=list)

    def find_all(self, tag: str, **attrs: str) -> list[Node]:
        found = []
        for child in self.children:
            if isinstance(child, Node):
                if child.tag == tag and all(child.attrs.get(k) == v for k, v in attrs.items()):
                    found.append(child)
                found.extend(child.find_all(tag, **attrs))
        return found

    def find(self, tag: str, **attrs: str) -> Node:
        found = self.find_all(tag, **attrs)
        assert len(found) == 1, f"expected one <{tag} {attrs}>, found {len(found)}"
        return found[0]

    def text(self) -> str:
        return "".join(c if isinstance(c, str) else c.text() for c in self.children)


class _TreeBuilder(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.root = Node("#document", {})
        self.current = self.root

    def handle_starttag(self, tag, attrs):
        node = Node(tag, dict(attrs), self.current)
        self.current.children.append(node)
        if tag not in VOID:
            self.current = node

    def handle_startendtag(self, tag, attrs):
        self.current.children.append(Node(tag, dict(attrs), self.current))

    def handle_endtag(self, tag):
        node = self.current
        while node is not self.root and node.tag != tag:
            node = node.parent
        if node is not self.root:
            self.current = node.parent

    def handle_data(self, data):
        self.current.children.append(data)


def parse(text: str) -> Node:
    builder = _TreeBuilder()
    builder.feed(text)
    builder.close()
    return builder.root


def body_rows(table: Node) -> list[list[str]]:
    """Cell texts of the rows in a table's <tbody>."""
    return [[cell.text() for cell in row.children if isinstance(cell, Node)]
            for row in table.find("tbody").find_all("tr")]


def header(table: Node) -> list[str]:
    return [th.text() for th in table.find("thead").find_all("th")]


# ---------------------------------------------------------------- synthetic documents
def _png(colour: str) -> bytes:
    """A small figure filled with one colour (a sine drawn over it), as PNG bytes."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=FIG_INCHES, facecolor=colour)
    ax = fig.add_axes((0.0, 0.0, 1.0, 1.0), facecolor=colour)
    t = np.linspace(0.0, 1.0, 100)
    ax.plot(t, np.sin(2 * np.pi * t), color="#000000", linewidth=1.0)
    ax.set_axis_off()
    return figure_png(fig, dpi=FIG_DPI)


def _half_wave_rows() -> list[dict[str, Any]]:
    """Rows n = 0..4 of a 50 Hz half-wave; ideal from the published series, 'simulated' lower."""
    ideal = [PEAK_V / math.pi, PEAK_V / 2, 0.212207 * PEAK_V, 0.0, -0.042441 * PEAK_V]
    rows = []
    for n, a in enumerate(ideal):
        sim = abs(a) * 0.93 if a else 1e-7
        rows.append({
            "n": n, "freq_hz": 50.0 * n, "ideal_v": abs(a), "ideal_phase_deg": 0.0,
            "estimate_v": abs(a) * 0.94 if a else None, "sim_v": sim,
            "sim_phase_deg": -3.25 * n,
            "delta_db": 20 * math.log10(sim / abs(a)) if a else None,
            "estimate_delta_db": 20 * math.log10(0.93 / 0.94) if a else None,
        })
    return rows


def run_document(title: str = f"Half-wave {HOSTILE} rectifier") -> dict[str, Any]:
    return {
        "circuit": "half-wave-demo",
        "title": title,
        "parameters": {"vpk": PEAK_V, "rload": 1000.0, "cres": 1e-6},
        "units": {"vpk": "V", "rload": "ohm", "cres": "F"},
        "choices": {"diode": "<b>sl_rect1a</b>"},
        "probe": "v(out)",
        "fundamental_hz": 50.0,
        "amplitude_v": PEAK_V,
        "ideal_kind": "half-wave",
        "estimate_kind": "truncated-cosine",
        "engine": {"name": "ngspice", "version": "39.3"},
        "settings": {"harmonics": 4, "tolerance": 1e-6, "max_periods": 2000,
                     "resampling": "spline"},
        "steady_state": {"method": "settle", "periods_simulated": 24, "engine_periods": 24,
                         "converged": True, "residual": 3.1e-8, "drift": 1.2e-8,
                         "tmax_s": 1e-5, "attempts": 1, "shooting_iterations": 0,
                         "shooting_residual": None, "fallback": None},
        "metrics": {"dc_v": 2.96, "rms_v": 4.65, "ripple_v": 9.3, "peak_v": 9.3,
                    "trough_v": 0.0, "crest_factor": 2.0, "thd": 0.43524, "thd_r": 0.3989,
                    "thd_orders": "2..4", "conduction_angle_deg": 178.6,
                    "efficiency": {"0": 0.4, "1": 0.3}},
        "harmonics": _half_wave_rows(),
        "notes": [f"note with {HOSTILE} inside"],
    }


BREAKDOWN = {
    "steps": ["junction drop", "source resistance", f"reservoir {HOSTILE}"],
    "harmonics": [1, 2, 4],
    "step_db": [[-0.61, -0.72, -1.03], [-0.10, -0.15, None], [0.02, -2.5, -6.0]],
    "cumulative_db": [[-0.61, -0.72, -1.03], [-0.71, -0.87, None], [-0.69, -3.37, -7.03]],
}


def verdict(status: str, limit: str, corner: str, value: float | None, margin: float | None,
            **extra: Any) -> dict[str, Any]:
    return {"design": "psu-a", "file": "psu-a.toml", "corner": corner, "limit": limit,
            "metric": "ripple_v", "unit": "V", "margin_unit": "V",
            "bound": {"min": None, "max": 1.5}, "value": value, "margin": margin,
            "status": status, "reason": extra.pop("reason", ""), **extra}


VERDICTS = [
    verdict("pass", "ripple", "rload=1k", 0.5, 1.0),
    verdict("fail", "ripple", "rload=50", 1.62, -0.12),
    verdict("error", "ripple", "rload=10", None, None, reason=f"simulation failed: {HOSTILE}"),
    verdict("fail", "ripple", "rload=20", 2.0, -0.5),
]

SWEEP = {
    "points": [
        {"index": 0, "varied": {"rload": 100.0}, "status": "ok", "error": None, "reused": True,
         "probe": "v(out)", "metrics": {"dc_v": 2.5, "rms_v": 4.1, "thd": 0.41}},
        {"index": 1, "varied": {"rload": 1000.0}, "status": "ok", "error": None, "reused": False,
         "probe": "v(out)", "metrics": {"dc_v": 2.9, "rms_v": 4.6, "thd": None}},
        {"index": 2, "varied": {"rload": 1e4}, "status": "failed",
         "error": f"timestep too small {HOSTILE}", "reused": False, "metrics": None},
    ],
    "simulated": 2, "reused": 1, "failed": 1,
}


def _figures() -> dict[str, bytes]:
    return {"comparison: one period, simulated over ideal": _png("#ff00ff"),
            f"spectrum {HOSTILE}": _png("#00ffff")}


def _run_html(**kw: Any) -> str:
    kw.setdefault("figures", _figures())
    kw.setdefault("breakdown", BREAKDOWN)
    kw.setdefault("verdicts", VERDICTS)
    kw.setdefault("caution", "Drive above safety-extra-low voltage.")
    return run_report(run_document(), **kw)


# ---------------------------------------------------------------- self-contained, escaped
def _assert_self_contained(root: Node) -> None:
    for tag in ("script", "link", "iframe", "object", "embed", "base", "form"):
        assert root.find_all(tag) == [], f"report holds a <{tag}>"
    for node in _walk(root):
        for name, value in node.attrs.items():
            assert not name.startswith("on"), f"<{node.tag}> has an event handler {name}"
            if name in ("src", "href", "srcset", "action", "poster", "data"):
                assert node.tag == "img" and name == "src", f"<{node.tag} {name}={value!r}>"
                assert value.startswith("data:image/png;base64,")
    css = root.find("style").text()
    assert "url(" not in css and "@import" not in css
    policy = [m for m in root.find_all("meta") if m.attrs.get("http-equiv") ==
              "Content-Security-Policy"]
    assert len(policy) == 1 and "default-src 'none'" in policy[0].attrs["content"]


def _walk(node: Node):
    for child in node.children:
        if isinstance(child, Node):
            yield child
            yield from _walk(child)


def test_run_report_is_self_contained() -> None:
    root = parse(_run_html())
    _assert_self_contained(root)
    assert len(root.find_all("img")) == 2


def test_run_report_escapes_document_strings() -> None:
    text = _run_html()
    root = parse(text)
    assert root.find_all("script") == [] and root.find_all("b") == []
    assert root.find("h1").text() == f"Half-wave {HOSTILE} rectifier"
    assert HOSTILE in root.find("title").text()
    assert root.find("section", id="notes").find("li").text() == f"note with {HOSTILE} inside"
    assert body_rows(root.find("table", id="choice-table")) == [["diode", "<b>sl_rect1a</b>"]]
    assert "<script>" not in text and "&lt;script&gt;alert(1)&lt;/script&gt;" in text


def test_run_report_harmonic_table() -> None:
    root = parse(_run_html())
    table = root.find("table", id="harmonic-table")
    assert len(header(table)) == 9
    rows = body_rows(table)
    assert [r[0] for r in rows] == ["0", "1", "2", "3", "4"]
    assert all(len(r) == 9 for r in rows)
    # Spiegel's half-wave series [from memory]: a2 = 0.212207 A -> 2.12207 V for A = 10 V,
    # shown with five significant digits; a3 = 0 and its dB change is not defined
    assert rows[2][1:3] == ["100 Hz", "2.1221 V"]
    assert rows[1][2] == "5 V"  # a1 = A/2
    assert rows[3][2] == "0 V" and rows[3][5] == DASH and rows[3][3] == DASH
    # 20 log10(0.93) = -0.6303 dB (common practice: amplitude ratio in dB)
    assert rows[2][5] == "-0.630"
    assert rows[2][7] == "-6.50\u00b0"


def test_run_report_circuit_tables() -> None:
    root = parse(_run_html())
    params = body_rows(root.find("table", id="parameter-table"))
    # SI prefixes (BIPM SI Brochure, 9th ed. 2019, Table 7): 1000 ohm = 1 kOhm, 1e-6 F = 1 uF
    assert params == [["vpk", "10 V", "V"], ["rload", "1 k\u03a9", "\u03a9"],
                      ["cres", "1 \u00b5F", "F"]]
    run = dict(body_rows_kv(root.find("table", id="run-table")))
    assert run["engine"] == "ngspice 39.3" and run["fundamental"] == "50 Hz"
    assert run["highest harmonic N"] == "4" and run["steady-state tolerance"] == "1e-6"
    steady = dict(body_rows_kv(root.find("table", id="steady-table")))
    assert steady["periodic steady state"] == "reached" and steady["engine TMAX"] == "10 \u00b5s"
    assert steady["shooting: state residual"] == DASH
    metrics = dict(body_rows_kv(root.find("table", id="metric-table")))
    assert metrics["THD (re the fundamental)"] == "43.52 %"  # Spiegel/Rashid: 0.43524 [memory]
    assert metrics["conduction angle"] == "178.60\u00b0"
    assert len(body_rows(root.find("table", id="efficiency-table"))) == 2


def body_rows_kv(table: Node) -> list[tuple[str, str]]:
    return [(row.find("th").text(), row.find("td").text())
            for row in table.find("tbody").find_all("tr")]


def test_run_report_breakdown_and_verdicts() -> None:
    root = parse(_run_html())
    table = root.find("table", id="breakdown-table")
    assert header(table) == ["step", "n = 1", "n = 2", "n = 4"]
    rows = body_rows(table)
    assert [r[0] for r in rows] == BREAKDOWN["steps"]
    assert rows[1][3] == f"{DASH}\u03a3 {DASH}"
    assert rows[2][2] == "-2.500\u03a3 -3.370"
    verdicts = body_rows(root.find("table", id="verdict-table"))
    assert [r[0] for r in verdicts] == ["FAIL", "FAIL", "ERROR", "pass"]
    assert [r[3] for r in verdicts] == ["rload=50", "rload=20", "rload=10", "rload=1k"]
    assert verdicts[0][4:7] == ["1.62 V", "\u2264 1.5 V", "-120 mV"]


def test_run_report_figures_round_trip() -> None:
    figures = _figures()
    root = parse(run_report(run_document(), figures=figures))
    images = root.find_all("img")
    assert [img.attrs["alt"] for img in images] == list(figures)
    for img, data in zip(images, figures.values()):
        assert base64.b64decode(img.attrs["src"].split(",", 1)[1], validate=True) == data
        # savefig size = inches x dpi (matplotlib's documented savefig behaviour)
        assert (img.attrs["width"], img.attrs["height"]) == ("300", "150")
    assert [f.text() for f in root.find_all("figcaption")] == list(figures)


def test_run_report_caution_block() -> None:
    root = parse(_run_html())
    block = root.find("div", role="alert")
    text = block.text()
    assert "Drive above safety-extra-low voltage." in text
    for words in ("Lethal voltages", "Stored charge in capacitors",
                  "local electrical codes and licensed practice"):
        assert words in text
    assert all(p in text for p in CAUTION_POINTS)
    # first thing after the heading: before every section
    body = root.find("body")
    order = [c for c in body.children if isinstance(c, Node)]
    assert order[1] is block


def test_run_report_caution_absent_or_from_document() -> None:
    plain = parse(run_report(run_document()))
    assert plain.find_all("div", role="alert") == []
    doc = run_document()
    doc["caution"] = "CAUTION: mains."
    carried = parse(run_report(doc))
    assert "CAUTION: mains." in carried.find("div", role="alert").text()


def test_run_report_unconverged_warns() -> None:
    doc = run_document()
    doc["steady_state"]["converged"] = False
    root = parse(run_report(doc))
    assert "NOT a steady-state one" in root.find("p", id="not-steady").text()


def test_run_report_minimal_document() -> None:
    root = parse(run_report({"circuit": "x", "title": ""}))
    assert root.find("h1").text() == "x"
    assert root.find_all("table", id="harmonic-table") == []


def test_run_report_current_probe_in_amperes() -> None:
    doc = run_document()
    doc["probe"] = "i(V1)"
    rows = body_rows(parse(run_report(doc)).find("table", id="harmonic-table"))
    assert rows[1][2] == "5 A"


# ---------------------------------------------------------------- numbers
@pytest.mark.parametrize(("value", "unit", "shown"), [
    # SI prefixes: BIPM, The International System of Units, 9th ed. 2019, Table 7
    (4.7e3, "ohm", "4.7 k\u03a9"),
    (1e-6, "F", "1 \u00b5F"),
    (2.2e-9, "s", "2.2 ns"),
    (0.00475123, "V", "4.7512 mV"),
    (1.5e6, "Hz", "1.5 MHz"),
    (999.9996, "V", "1 kV"),
    (-0.25, "V", "-250 mV"),
    (0.0, "V", "0 V"),
    (1e-20, "V", "1e-20 V"),
    (-math.inf, "V", "-\u221e V"),
    (None, "V", DASH),
    (math.nan, "V", DASH),
    (1e-6, "", "1e-6"),
    (np.float64(325.0), "V", "325 V"),
])
def test_format_eng_si_prefixes(value, unit, shown) -> None:
    assert format_eng(value, unit) == shown


def test_format_db_signed() -> None:
    # 20 log10(2) = 6.0206 dB (common practice)
    assert format_db(20 * math.log10(2)) == "+6.021"
    assert format_db(-20 * math.log10(2), "dBc", sign=False) == "-6.021 dBc"
    assert format_db(None) == DASH and format_db(-math.inf) == "-\u221e"


# ---------------------------------------------------------------- bad input
@pytest.mark.parametrize("bad", [
    {**BREAKDOWN, "step_db": BREAKDOWN["step_db"][:2]},
    {**BREAKDOWN, "cumulative_db": [[0.0, 0.0], [0.0, 0.0], [0.0, 0.0]]},
    {**BREAKDOWN, "step_db": None, "cumulative_db": None},
    {**BREAKDOWN, "step_db": [["a", 0.0, 0.0]] * 3},
    {**BREAKDOWN, "steps": []},
    {**BREAKDOWN, "harmonics": "1,2,4"},
])
def test_breakdown_table_rejects_bad_shape(bad) -> None:
    with pytest.raises(InputError, match="effect breakdown") as info:
        breakdown_table(bad)
    assert "\n" not in str(info.value)


def test_run_report_rejects_non_png_figure() -> None:
    with pytest.raises(InputError, match="not PNG"):
        run_report(run_document(), figures={"plot": b"GIF89a not a png"})
    with pytest.raises(InputError, match="not PNG bytes"):
        run_report(run_document(), figures={"plot": "text"})


# ---------------------------------------------------------------- check and sweep
def test_check_report_failures_first_with_counts() -> None:
    rows = [*VERDICTS, {"design": "psu-b", "corner": "nominal", "limit": "dc", "unit": "V",
                        "value": 5.0, "bound": {"min": 4.75, "max": 5.25}, "margin": 0.25,
                        "passed": True}]
    text = check_report(rows, title=f"nightly {HOSTILE}")
    root = parse(text)
    _assert_self_contained(root)
    table = body_rows(root.find("table", id="verdict-table"))
    assert [r[0] for r in table] == ["FAIL", "FAIL", "ERROR", "pass", "pass"]
    assert table[2][7] == f"simulation failed: {HOSTILE}"
    assert table[4][5] == "4.75 V \u2026 5.25 V" and table[4][6] == "+250 mV"
    assert "5 checks: 2 FAIL, 1 ERROR, 2 pass" in root.find("section", id="verdicts").text()
    cards = [dd.text() for dd in root.find("dl").find_all("dd")]
    assert cards == ["5", "2", "1", "2"]
    assert root.find_all("div", role="alert") == []


def test_sweep_report_points_table() -> None:
    text = sweep_report(SWEEP, title=f"sweep {HOSTILE}", figures={"harmonics": _png("#00ffff")},
                        units={"rload": "ohm"}, caution="High drive.")
    root = parse(text)
    _assert_self_contained(root)
    table = root.find("table", id="point-table")
    assert header(table) == ["#", "rload [\u03a9]", "status", "DC", "RMS", "THD", "error"]
    rows = body_rows(table)
    assert [r[:3] for r in rows] == [["0", "100 \u03a9", "okstored"], ["1", "1 k\u03a9", "ok"],
                                     ["2", "10 k\u03a9", "failed"]]
    assert rows[0][3:6] == ["2.5 V", "4.1 V", "41 %"]
    assert rows[1][5] == DASH and rows[2][3] == DASH
    assert rows[2][6] == f"timestep too small {HOSTILE}"
    assert len(root.find_all("img")) == 1
    assert "High drive." in root.find("div", role="alert").text()


def test_write_report_round_trip(tmp_path: Path) -> None:
    text = _run_html()
    path = tmp_path / "out" / "report.html"
    write_report(path, text)
    assert path.read_text(encoding="utf-8") == text
    (tmp_path / "file").write_text("x")
    with pytest.raises(InputError, match="is a file"):
        write_report(tmp_path / "file" / "r.html", text)


# ---------------------------------------------------------------- the real browser
def _under_ci() -> bool:
    return os.environ.get("CI", "").strip().lower() not in ("", "0", "false", "no")


def require_chromium() -> str:
    """Path of Debian's chromium; skip without it, fail under CI=true."""
    path = CHROMIUM if os.access(CHROMIUM, os.X_OK) else shutil.which("chromium")
    if path:
        return path
    problem = f"Debian's chromium ({CHROMIUM}) is not installed"
    if _under_ci():
        pytest.fail(f"{problem}; CI must render the HTML reports: {CHROMIUM_HINT}", pytrace=False)
    pytest.skip(f"{problem}; install it with: {CHROMIUM_HINT}")


def chromium(page: Path, work: Path, *extra: str) -> subprocess.CompletedProcess:
    browser = require_chromium()
    command = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
               "--no-first-run", "--disable-background-networking", "--disable-component-update",
               "--disable-sync", "--hide-scrollbars", "--force-device-scale-factor=1",
               f"--user-data-dir={work / 'chromium-profile'}", *extra, page.as_uri()]
    env = {**os.environ, "HOME": str(work)}
    done = subprocess.run(command, capture_output=True, text=True, timeout=90, env=env,
                          stdin=subprocess.DEVNULL)
    assert done.returncode == 0, f"chromium exit {done.returncode}: {done.stderr[-2000:]}"
    return done


def dump_dom(page: Path, work: Path) -> Node:
    return parse(chromium(page, work, "--dump-dom").stdout)


def screenshot(page: Path, work: Path, *, width: int = 1200, height: int = 3000) -> np.ndarray:
    """The painted page as an (height, width, 3) array of 0..255 integers."""
    from matplotlib.image import imread

    shot = work / f"{page.stem}.png"
    chromium(page, work, f"--screenshot={shot}", f"--window-size={width},{height}")
    pixels = imread(shot)
    return np.rint(pixels[..., :3] * 255).astype(int)


def _count(pixels: np.ndarray, colour: tuple[int, int, int], tol: int = 2) -> int:
    return int(np.all(np.abs(pixels - np.array(colour)) <= tol, axis=-1).sum())


@pytest.mark.browser
def test_run_report_renders_in_chromium(tmp_path: Path) -> None:
    require_chromium()
    page = tmp_path / "run.html"
    write_report(page, _run_html())
    dom = dump_dom(page, tmp_path)
    assert dom.find_all("script") == []
    assert dom.find("h1").text() == f"Half-wave {HOSTILE} rectifier"
    assert len(body_rows(dom.find("table", id="harmonic-table"))) == 5
    assert len(body_rows(dom.find("table", id="breakdown-table"))) == 3
    assert len(body_rows(dom.find("table", id="verdict-table"))) == 4
    assert len(body_rows(dom.find("table", id="parameter-table"))) == 3
    images = dom.find_all("img")
    assert len(images) == 2 and all(i.attrs["src"].startswith("data:image/png;base64,")
                                    for i in images)
    assert "licensed practice" in dom.find("div", role="alert").text()

    pixels = screenshot(page, tmp_path)
    white = np.all(pixels >= 250, axis=-1)
    assert white.mean() < 0.97, "the screenshot is (nearly) blank"
    area = (FIG_INCHES[0] * FIG_DPI) * (FIG_INCHES[1] * FIG_DPI)
    # each figure is one colour but for a thin line: most of its 300 x 150 px must be painted
    assert _count(pixels, MAGENTA) > 0.8 * area, "first figure not decoded or not painted"
    assert _count(pixels, CYAN) > 0.8 * area, "second figure not decoded or not painted"
    assert _count(pixels, (0xB0, 0x00, 0x20)) > 2000, "caution border not painted"


@pytest.mark.browser
def test_sweep_and_check_reports_render_in_chromium(tmp_path: Path) -> None:
    require_chromium()
    sweep = tmp_path / "sweep.html"
    write_report(sweep, sweep_report(SWEEP, title="sweep", figures={"h": _png("#ff00ff")}))
    dom = dump_dom(sweep, tmp_path)
    assert len(body_rows(dom.find("table", id="point-table"))) == 3
    assert len(dom.find_all("img")) == 1
    check = tmp_path / "check.html"
    write_report(check, check_report(VERDICTS, title="check"))
    dom = dump_dom(check, tmp_path)
    rows = body_rows(dom.find("table", id="verdict-table"))
    assert [r[0] for r in rows] == ["FAIL", "FAIL", "ERROR", "pass"]
    pixels = screenshot(check, tmp_path, height=1200)
    assert np.all(pixels >= 250, axis=-1).mean() < 0.99
