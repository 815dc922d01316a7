"""Shooting-Newton steady state against plain settling (issue: fast periodic steady state).

Both methods must give the same harmonics to 1e-6 of the largest component on circuits with one,
two and several storage elements; a circuit where shooting cannot converge falls back to plain
settling and says so. Plain settling is the reference: it is what the engine's own transient
gives once the circuit has settled (Aprille & Trick, Proc. IEEE 60(1), 1972 [from memory]: the
periodic solution is unique for these dissipative circuits, so both must find the same one).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from simloop.analyse import RunSettings, run_circuit
from simloop.steady import SteadySettings, shoot

CIRCUITS = Path(__file__).parent / "data" / "circuits"


@pytest.fixture(scope="module")
def pool():
    from simloop.engine import EnginePool

    with EnginePool(2) as p:
        yield p


def _complex(spectrum):
    return spectrum.amplitude * np.exp(-1j * spectrum.phase_rad)




@pytest.mark.engine
@pytest.mark.parametrize(
    ("circuit", "values", "states"),
    [
        ("half-wave", {"cres": 1e-3, "rsrc": 20.0, "rload": 1e3}, 1),  # one capacitor
        (CIRCUITS / "choke-input.cir", {}, 2),  # an inductor and a capacitor
        (CIRCUITS / "multiplier.cir", {}, 4),  # four capacitors
    ],
    ids=["one", "two", "several"],
)
def test_shooting_agrees_with_settling(pool, circuit, values, states):
    extra = {} if circuit == "half-wave" else {"probe": "v(out)", "ideal_kind": "half-wave"}
    results = {}
    for method in ("settle", "shoot"):
        settings = RunSettings(harmonics=10, steady=SteadySettings(method=method), **extra)
        results[method] = run_circuit(circuit, values=values, settings=settings, pool=pool)
    plain, shot = results["settle"], results["shoot"]
    assert plain.converged and shot.converged
    assert shot.steady.method == "shooting"
    a, b = _complex(plain.simulated), _complex(shot.simulated)
    a[0], b[0] = plain.simulated.dc, shot.simulated.dc
    difference = float(np.max(np.abs(a - b)) / np.max(np.abs(a)))
    print(f"{states} states: settle {plain.steady.engine_periods} periods, shoot "
          f"{shot.steady.engine_periods} period-equivalents in {shot.steady.iterations} "
          f"iterations; difference {difference:.1e}")
    assert difference <= 1e-6


@pytest.mark.engine
def test_shooting_that_cannot_converge_falls_back_and_says_so(pool):
    # A tolerance below what floating point can reach makes Newton stall: simloop must fall back
    # to plain settling, report it, and not claim convergence it did not reach.
    settings = RunSettings(harmonics=4, steady=SteadySettings(method="shoot", tolerance=1e-15,
                                                               max_periods=24))
    result = run_circuit("half-wave", values={"cres": 1e-3, "rsrc": 20.0}, settings=settings,
                         pool=pool)
    assert result.steady.fallback is not None
    assert "shooting did not converge" in result.steady.fallback
    assert any("shooting did not converge" in note for note in result.notes)
    assert result.steady.method == "settle"
    assert not result.converged


def test_shoot_solves_a_linear_period_map_in_one_newton_step():
    # For a linear map Phi(x) = A x + b the fixed point is (I - A)^-1 b; Newton with an exact
    # (finite-difference) Jacobian lands on it in one step (first principles).
    a = np.array([[0.9, 0.05], [0.0, 0.5]])
    b = np.array([1.0, -2.0])
    expected = np.linalg.solve(np.eye(2) - a, b)

    def run_states(states, periods):
        return [(None, None, "linear", a @ x + b) for x in states]

    out = shoot(run_states, np.zeros(2), scale=np.abs(expected), tolerance=1e-9)
    assert out.converged and out.iterations == 1
    np.testing.assert_allclose(out.state, expected, rtol=1e-8)
    assert out.engine_periods == 1 + 2 + 1  # phi(x0), two Jacobian columns, the step
