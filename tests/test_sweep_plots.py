"""Sweep figures: layout, axis scales, lines per value, gaps, levels, the PNG file.

Synthetic points (no engine) carry the ideal half-wave series of a drive A cos wt: DC A/pi,
A_1 = A/2, even n: 2A/(pi (n^2 - 1)), odd n >= 3: 0 (Spiegel, Mathematical Handbook of Formulas
and Tables, Fourier series table [from memory]); the "simulated" values are those scaled down.
"""

from __future__ import annotations

import doctest
import math

import numpy as np
import pytest

from simloop import sweep_plots
from simloop.errors import InputError
from simloop.sweep_plots import save_sweep_figure, sweep_figure


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


def _scale(rload: float) -> float:
    return 0.80 + 0.05 * math.log10(rload)  # less drop at a lighter load


def _point(index, varied, *, status="ok", series=_half_wave):
    vpk = float(varied.get("vpk", 5.0))
    rload = float(varied.get("rload", 1e3))
    base = {"index": index, "varied": dict(varied), "parameters": {"rload": rload, "vpk": vpk},
            "choices": {}, "reused": False}
    if status == "failed":
        return {**base, "status": "failed", "error": "timestep too small", "steady_state": None,
                "metrics": None, "harmonics": None}
    rows = []
    for n in range(6):
        ideal = series(vpk, n)
        sim = _scale(rload) * ideal + (2e-4 * vpk if n % 2 and n > 1 else 0.0)
        rows.append({"n": n, "freq_hz": 50.0 * n, "ideal_v": ideal, "ideal_phase_deg": 0.0,
                     "estimate_v": None, "sim_v": sim, "sim_phase_deg": 0.0,
                     "delta_db": 20 * math.log10(sim / ideal) if ideal > 0 else None,
                     "estimate_delta_db": None})
    return {**base, "status": status, "error": None, "steady_state": {},
            "metrics": {"dc_v": rows[0]["sim_v"], "rms_v": 1.0, "ripple_v": 1.0, "thd": 0.4},
            "harmonics": rows}


RLOADS = (100.0, 300.0, 1e3, 3e3, 1e4)
VPKS = (2.0, 5.0, 10.0)
FAILED = (1e3, 5.0)  # (rload, vpk) of the failed point
UNCONVERGED = (3e3, 10.0)


@pytest.fixture
def points():
    pts = []
    for vpk in VPKS:
        for rload in RLOADS:
            status = ("failed" if (rload, vpk) == FAILED else
                      "unconverged" if (rload, vpk) == UNCONVERGED else "ok")
            pts.append(_point(len(pts), {"rload": rload, "vpk": vpk}, status=status))
    return pts


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    import matplotlib.pyplot as plt

    plt.close("all")


def _by_gid(ax, gid):
    return [line for line in ax.get_lines() if line.get_gid() == gid]


def _line(ax, label):
    (line,) = [li for li in _by_gid(ax, "simulated") if li.get_label() == label]
    return line


# --------------------------------------------------------------------------- layout
@pytest.mark.parametrize("harmonics", [(1,), (1, 2, 3), (0, 1, 2, 4)])
def test_sweep_figure_axes_grid(points, harmonics):
    fig = sweep_figure(points, x_name="rload", line_name="vpk", harmonics=harmonics,
                       x_unit="ohm", line_unit="V")
    assert len(fig.axes) == 3 * len(harmonics)
    rows, cols = fig.axes[0].get_subplotspec().get_gridspec().get_geometry()
    assert (rows, cols) == (3, len(harmonics))
    assert fig.axes[0].get_ylabel().startswith("simulated level")
    assert "dBV re 1 V rms" in fig.axes[0].get_ylabel()
    assert "dBc re n = 1" in fig.axes[len(harmonics)].get_ylabel()
    assert "dB" in fig.axes[2 * len(harmonics)].get_ylabel()
    assert fig.axes[-1].get_xlabel() == "rload [Ω]"


def test_sweep_figure_log_axis_for_decades(points):
    fig = sweep_figure(points, x_name="rload", line_name="vpk", x_unit="ohm")
    assert {ax.get_xscale() for ax in fig.axes} == {"log"}  # 100 .. 10k: two decades


def test_sweep_figure_linear_axis_under_a_decade():
    pts = [_point(i, {"vpk": v}) for i, v in enumerate((1.0, 2.0, 3.0, 4.0, 5.0))]
    fig = sweep_figure(pts, x_name="vpk", x_unit="V")
    assert {ax.get_xscale() for ax in fig.axes} == {"linear"}  # 1 .. 5: ratio 5 < 10


def test_sweep_figure_line_per_value(points):
    fig = sweep_figure(points, x_name="rload", line_name="vpk", harmonics=(1, 2, 3),
                       line_unit="V")
    top = fig.axes[0]
    assert [li.get_label() for li in _by_gid(top, "simulated")] == [
        "vpk = 2 V", "vpk = 5 V", "vpk = 10 V"]
    # the ideal level depends on vpk: one dashed line per value, in the same colour
    ideals = _by_gid(top, "ideal")
    assert len(ideals) == 3
    for sim, ideal in zip(_by_gid(top, "simulated"), ideals):
        assert ideal.get_color() == sim.get_color() and ideal.get_linestyle() == "--"
    legend = fig.legends[0]
    assert legend.get_title().get_text() == "vpk [V]"
    assert [t.get_text() for t in legend.get_texts()][:3] == ["2 V", "5 V", "10 V"]


def test_sweep_figure_single_line(points):
    five = [p for p in points if p["varied"]["vpk"] == 5.0]
    fig = sweep_figure(five, x_name="rload", harmonics=(1, 2))
    assert len(_by_gid(fig.axes[0], "simulated")) == 1
    assert len(_by_gid(fig.axes[0], "ideal")) == 1


# --------------------------------------------------------------------------- values
def test_sweep_figure_levels_recomputed(points):
    fig = sweep_figure(points, x_name="rload", line_name="vpk", harmonics=(0, 2), line_unit="V")
    cols = 2
    dc_dbv = _line(fig.axes[0], "vpk = 10 V")
    h2_dbv = _line(fig.axes[1], "vpk = 10 V")
    h2_dbc = _line(fig.axes[cols + 1], "vpk = 10 V")
    h2_delta = _line(fig.axes[2 * cols + 1], "vpk = 10 V")
    np.testing.assert_array_equal(dc_dbv.get_xdata(), RLOADS)
    for k, rload in enumerate(RLOADS):
        if (rload, 10.0) == UNCONVERGED:
            continue
        s = _scale(rload)
        # dBV re 1 V rms: DC at 20 log10|A0|, a sinusoid at 20 log10(A/sqrt 2) (common practice)
        assert dc_dbv.get_ydata()[k] == pytest.approx(20 * math.log10(s * 10 / math.pi), rel=1e-13)
        a2 = s * 2 * 10 / (3 * math.pi)
        assert h2_dbv.get_ydata()[k] == pytest.approx(20 * math.log10(a2 / math.sqrt(2)), rel=1e-13)
        # dBc re the fundamental: 20 log10(A2/A1) = 20 log10(4/(3 pi)) for a half-wave
        assert h2_dbc.get_ydata()[k] == pytest.approx(20 * math.log10(4 / (3 * math.pi)), rel=1e-13)
        assert h2_delta.get_ydata()[k] == pytest.approx(20 * math.log10(s), rel=1e-13)


def test_sweep_figure_failed_point_gap(points):
    fig = sweep_figure(points, x_name="rload", line_name="vpk", harmonics=(1, 2), line_unit="V")
    k = RLOADS.index(FAILED[0])
    for row in range(3):
        ax = fig.axes[row * 2 + 1]
        y = np.asarray(_line(ax, "vpk = 5 V").get_ydata(), dtype=float)
        assert np.isnan(y[k]) and np.all(np.isfinite(np.delete(y, k)))
        marks = _by_gid(ax, "failed")
        assert sorted(float(m.get_xdata()[0]) for m in marks) == sorted([FAILED[0], UNCONVERGED[0]])
        assert {m.get_marker() for m in marks} == {"x"}
    # the unconverged point is also left out of its simulated line
    y10 = np.asarray(_line(fig.axes[0], "vpk = 10 V").get_ydata(), dtype=float)
    assert np.isnan(y10[RLOADS.index(UNCONVERGED[0])])


def test_sweep_figure_absent_ideal(points):
    fig = sweep_figure(points, x_name="rload", line_name="vpk", harmonics=(2, 3))
    # n = 3 of a half-wave: no ideal, so no dashed line and no delta
    assert _by_gid(fig.axes[1], "ideal") == []
    for line in _by_gid(fig.axes[2 * 2 + 1], "simulated"):
        assert np.all(np.isnan(np.asarray(line.get_ydata(), dtype=float)))
    assert len(_by_gid(fig.axes[0], "ideal")) == 3  # n = 2 has its ideal
    assert np.all(np.isfinite(_line(fig.axes[1], "vpk = 2").get_ydata()))


def test_sweep_figure_full_wave_dbc_reference():
    pts = [_point(i, {"vpk": v}, series=_full_wave) for i, v in enumerate((2.0, 4.0, 8.0))]
    fig = sweep_figure(pts, x_name="vpk", harmonics=(2, 4), x_unit="V")
    assert "re n = 2" in fig.axes[2].get_ylabel()
    h4 = _by_gid(fig.axes[3], "simulated")[0]
    # |cos| series: A4/A2 = (2^2 - 1)/(4^2 - 1) = 1/5 (Spiegel [from memory])
    np.testing.assert_allclose(h4.get_ydata(), 20 * math.log10(0.2), rtol=1e-13)
    assert _by_gid(fig.axes[2], "simulated") == []  # the reference itself: 0 dB, not drawn


def test_sweep_figure_categorical_x():
    models = ("sl_rect1a", "sl_schottky", "sl_signal")
    pts = [_point(i, {"diode": m, "vpk": v}) for i, (v, m) in
           enumerate((v, m) for v in (2.0, 5.0) for m in models)]
    fig = sweep_figure(pts, x_name="diode", line_name="vpk", harmonics=(1,), line_unit="V")
    ax = fig.axes[-1]
    assert [t.get_text() for t in ax.get_xticklabels()] == list(models)
    assert ax.get_xscale() == "linear"
    np.testing.assert_array_equal(_by_gid(fig.axes[0], "simulated")[0].get_xdata(), [0, 1, 2])
    assert ax.get_xlabel() == "diode (model)"


def test_sweep_figure_fixed_selects_slice(points):
    three = [{**p, "varied": {**p["varied"], "cres": c}, "index": 100 * k + p["index"]}
             for k, c in enumerate((1e-6, 1e-5)) for p in points]
    with pytest.raises(InputError, match="fixed="):
        sweep_figure(three, x_name="rload", line_name="vpk")
    fig = sweep_figure(three, x_name="rload", line_name="vpk", fixed={"cres": 1e-5})
    assert len(_by_gid(fig.axes[0], "simulated")) == len(VPKS)


def test_sweep_figure_bad_input(points):
    with pytest.raises(InputError, match="no sweep points"):
        sweep_figure([], x_name="rload")
    with pytest.raises(InputError, match="no value for 'cres'"):
        sweep_figure(points, x_name="cres")
    with pytest.raises(InputError, match="distinct orders"):
        sweep_figure(points, x_name="rload", line_name="vpk", harmonics=(2, 2))
    with pytest.raises(InputError, match="both 'rload'"):
        sweep_figure(points, x_name="rload", line_name="rload")
    with pytest.raises(InputError, match="plot fewer orders"):
        sweep_figure(points, x_name="rload", harmonics=range(9), fixed={"vpk": 2.0})


def test_sweep_figure_shared_ideal_drawn_once(points):
    from simloop.plots import SERIES_STYLE

    # the ideal depends on vpk, not on rload: with rload as the line variable it is one line
    fig = sweep_figure(points, x_name="vpk", line_name="rload", harmonics=(1,), line_unit="ohm")
    (ideal,) = _by_gid(fig.axes[0], "ideal")
    assert ideal.get_color() == SERIES_STYLE["ideal"]["color"]
    np.testing.assert_allclose(ideal.get_ydata(),
                               [20 * math.log10(v / 2 / math.sqrt(2)) for v in VPKS], rtol=1e-13)
    assert len(_by_gid(fig.axes[0], "simulated")) == len(RLOADS)


def test_sweep_figure_all_failed():
    pts = [_point(i, {"rload": r}, status="failed") for i, r in enumerate((100.0, 1e3))]
    fig = sweep_figure(pts, x_name="rload", harmonics=(1, 2))
    assert len(fig.axes) == 6
    for ax in fig.axes:
        assert len(_by_gid(ax, "failed")) == 1 and _by_gid(ax, "ideal") == []


# --------------------------------------------------------------------------- file
def test_save_sweep_figure_png(points, tmp_path):
    import matplotlib.image

    fig = sweep_figure(points, x_name="rload", line_name="vpk", x_unit="ohm", line_unit="V",
                       title="half-wave rectifier against load")
    path = tmp_path / "plots" / "sweep.png"
    save_sweep_figure(fig, path)
    image = matplotlib.image.imread(path)
    assert image.ndim == 3 and image.shape[2] in (3, 4)
    assert image.shape[0] > 600 and image.shape[1] > 1000
    assert float(np.min(image[..., :3])) < 0.2  # something dark is drawn on the white page
    assert [p.name for p in path.parent.iterdir()] == ["sweep.png"]


def test_sweep_plots_module_examples():
    result = doctest.testmod(sweep_plots, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted >= 5 and result.failed == 0
