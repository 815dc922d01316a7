"""Effect breakdown: the steps must account exactly for the change from ideal to simulated."""

from __future__ import annotations

import math

import numpy as np
import pytest

from simloop.analyse import RunSettings, run_circuit
from simloop.explain import explain_circuit

pytestmark = pytest.mark.engine


@pytest.fixture(scope="module")
def pool():
    from simloop.engine import EnginePool

    with EnginePool(2) as p:
        yield p


@pytest.mark.parametrize(
    ("circuit", "values"),
    [("half-wave", {"cres": 1e-3}), ("full-wave-bridge", {}), ("switching-stage", {})],
)
def test_breakdown_steps_add_up_to_total(pool, circuit, values):
    settings = RunSettings(harmonics=6)
    breakdown = explain_circuit(circuit, values=values, settings=settings, pool=pool)
    d = breakdown.to_dict()
    levels = np.array(d["levels_v"])
    # volts: the ideal level plus every step's change is the simulated level, exactly
    np.testing.assert_allclose(np.sum(np.array(d["step_v"]), axis=0), levels[-1], rtol=0,
                               atol=1e-12 * np.max(np.abs(levels)))
    # dB: where the ideal harmonic exists, the steps sum to 20 log10(sim / ideal)
    for n in d["harmonics"]:
        steps = [row[n] for row in d["step_db"]]
        if steps[0] is None:
            continue
        total = 20 * math.log10(abs(levels[-1][n]) / abs(levels[0][n]))
        assert sum(steps) == pytest.approx(total, abs=1e-9)
    # the last step is the circuit as built: the same as an ordinary run
    direct = run_circuit(circuit, values=values, settings=settings, pool=pool)
    np.testing.assert_allclose(levels[-1], direct.simulated.amplitude, rtol=1e-9, atol=1e-12)


def test_breakdown_attributes_the_reservoir_to_the_filter_step(pool):
    # Common practice: a reservoir capacitor raises the DC towards the peak and cuts the
    # harmonics of the output; in the breakdown that change must land on the filter step.
    d = explain_circuit("half-wave", values={"cres": 1e-3}, settings=RunSettings(harmonics=4),
                        pool=pool).to_dict()
    filt = d["steps"].index("+ load and filter")
    assert d["step_db"][filt][0] > 6.0  # DC up by more than 6 dB
    assert all(d["step_db"][filt][n] < -6.0 for n in (1, 2, 4))
    drop = d["steps"].index("constant drop")
    assert d["step_db"][drop][0] < 0  # the forward drop lowers the DC (common practice)
