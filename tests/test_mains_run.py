"""Line-current harmonics and Page's bound on simulated circuits (issue: which effect moved...)."""

from __future__ import annotations

import math

import pytest

from simloop.analyse import RunSettings, run_circuit

pytestmark = pytest.mark.engine


@pytest.fixture(scope="module")
def pool():
    from simloop.engine import EnginePool

    with EnginePool(2) as p:
        yield p


@pytest.mark.parametrize("diode", ["sl_ideal", "sl_rect1a", "sl_schottky", "sl_fast"])
def test_page_bound_holds_on_resistive_multipliers(pool, diode):
    # C. H. Page, "Frequency conversion with positive nonlinear resistors," J. Res. NBS 56(4),
    # 1956, RP2664 [confirmed]: efficiency to harmonic n <= 1/n^2 for a positive resistor.
    result = run_circuit("half-wave", choices={"diode": diode}, settings=RunSettings(harmonics=8),
                         pool=pool)
    page = result.metrics["page"]
    assert not page["exceeds"]
    for row in page["orders"]:
        if row["order"] >= 2:
            assert row["efficiency"] <= 1.0 / row["order"] ** 2


def test_page_near_ideal_diode_approaches_closed_form(pool):
    # Derivation (see tests/test_bounds.py): an ideal diode into R driven by V cos wt converts
    # the power it takes in at the fundamental, V^2/(8R), to the 2nd harmonic in R with
    # efficiency 16/(9 pi^2) (half-wave series, Spiegel, Schaum's handbook [from memory]).
    # Here R = rsrc + rload and only rload counts as the load: eta2 = 16/(9 pi^2) rload/R.
    # The 1 mV drop of sl_ideal on 12 V moves it by about 1e-3 relative.
    rsrc, rload = 0.5, 100.0
    result = run_circuit("half-wave", values={"rsrc": rsrc, "rload": rload},
                         choices={"diode": "sl_ideal"}, settings=RunSettings(harmonics=4),
                         pool=pool)
    eta2 = next(r["efficiency"] for r in result.metrics["page"]["orders"] if r["order"] == 2)
    assert eta2 == pytest.approx(16 / (9 * math.pi**2) * rload / (rsrc + rload), rel=3e-3)


def test_mains_front_end_class_d_check_is_consistent(pool):
    # A 230 V rms (325 V peak) bridge with a reservoir: the classic peaky line current. The
    # limits are the Class D table (IEC 61000-3-2 as reproduced in secondary sources [from
    # memory]): 3.4, 1.9, 1.0, 0.5, 0.35 mA/W for orders 3..11, 3.85/n mA/W above, never above
    # the Class A values (2.30, 1.14, 0.77, 0.40, 0.33 A; 0.21 A at 13; 0.15 x 15/n A above).
    result = run_circuit("full-wave-bridge",
                         values={"vpk": 325.0, "rsrc": 2.0, "cres": 220e-6, "rload": 1e3},
                         settings=RunSettings(harmonics=40, mains_class="D"), pool=pool)
    mains = result.metrics["mains"]
    power = mains["power_w"]
    # from the spectra (exact spline integration) vs the trapezoid rule on the engine's points
    assert power == pytest.approx(result.metrics["source_power_w"], rel=1e-5)
    per_watt = {3: 3.4, 5: 1.9, 7: 1.0, 9: 0.5, 11: 0.35}
    class_a = {3: 2.30, 5: 1.14, 7: 0.77, 9: 0.40, 11: 0.33, 13: 0.21}
    for row in mains["orders"]:
        n = row["order"]
        if n % 2 == 0:
            assert row["limit_a_rms"] is None
            continue
        d = per_watt.get(n, 3.85 / n) * 1e-3 * power
        a = class_a.get(n, 0.15 * 15 / n)
        assert row["limit_a_rms"] == pytest.approx(min(a, d), rel=1e-12)
        assert row["margin_a"] == pytest.approx(row["limit_a_rms"] - row["current_a_rms"], rel=1e-9)
        assert row["passed"] == (row["current_a_rms"] <= row["limit_a_rms"])
    assert mains["passed"] == all(r["passed"] for r in mains["orders"])
    # power factor = P / (V_rms I_rms) with the ideal 230 V source (common practice)
    pf = power / (325.0 / math.sqrt(2) * mains["line_current_a_rms"])
    assert result.metrics["power_factor"] == pytest.approx(pf, rel=1e-3)
    assert 0.3 < pf < 0.8  # a capacitor-input rectifier's poor power factor (common practice)
    assert "secondary sources" in mains["source_note"]


def test_design_limits_on_mains_metrics(tmp_path):
    # The mains figures are design-file metrics: a limit on power_factor and on the smallest
    # margin under the Class D limits, evaluated against the run's own figures.
    from simloop.design import check_designs, load_design

    design = tmp_path / "front-end.toml"
    design.write_text(
        'circuit = "full-wave-bridge"\n'
        '[settings]\nharmonics = 40\nmains_class = "D"\n'
        '[parameters]\nvpk = 325\nrsrc = 2\ncres = "220u"\nrload = "1k"\n'
        '[[limit]]\nmetric = "power_factor"\nmin = 0.3\n'
        '[[limit]]\nmetric = "mains_margin_a"\nmin = 0\n', encoding="utf-8")
    (outcome,) = check_designs([load_design(design)], workers=1)
    by_metric = {v.metric: v for v in outcome.verdicts}
    point = outcome.points[0]
    pf = by_metric["power_factor"]
    assert pf.value == pytest.approx(point["metrics"]["power_factor"], rel=1e-12)
    margins = [r["margin_a"] for r in point["metrics"]["mains"]["orders"]
               if r["limit_a_rms"] is not None]
    assert by_metric["mains_margin_a"].value == pytest.approx(min(margins), rel=1e-12)
