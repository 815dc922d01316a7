"""Settling logic on synthetic waveforms (no engine): the drift estimate must be honest."""

from __future__ import annotations

import math

import numpy as np
import pytest

from simloop.errors import InputError
from simloop.steady import SteadySettings, default_tmax, next_period_count, settle

F0 = 50.0
T = 1 / F0


def synthetic(tau_periods: float, *, seed: int = 1):
    """A 'circuit' whose output is a half-wave shape plus an offset decaying as exp(-t/tau).

    Returns the run hook for settle() and a record of the calls.
    """
    rng = np.random.default_rng(seed)
    calls = []

    def run(periods: int, tstart: float):
        calls.append(periods)
        n = 2000 * periods
        steps = rng.uniform(0.5, 1.5, n)
        t = np.concatenate(([0.0], np.cumsum(steps) / np.sum(steps) * periods * T))
        x = np.maximum(np.sin(2 * math.pi * F0 * t), 0.0) + 0.5 * np.exp(-t / (tau_periods * T))
        keep = t >= tstart
        return t[keep], {"out": x[keep]}, "synthetic-1"

    return run, calls


def watch(vectors):
    return [vectors["out"]]


@pytest.mark.parametrize("tau", [2.0, 8.0, 30.0])
def test_settle_converges_and_remaining_error_is_below_tolerance(tau):
    run, calls = synthetic(tau)
    tol = 1e-6
    st = settle(run, fundamental_hz=F0, watch=watch, settings=SteadySettings(tolerance=tol),
                tmax=default_tmax(F0, 10), harmonics=10)
    assert st.converged
    # The true change still to come: the offset left at the end, 0.5 exp(-P T / tau T),
    # relative to the largest component (DC of the half-wave, 1/pi, plus the offset).
    remaining = 0.5 * math.exp(-st.periods_simulated / tau) / (1 / math.pi)
    assert remaining <= 3 * tol
    assert st.engine_periods == sum(calls)
    assert st.engine_version == "synthetic-1"


def test_settle_reports_unconverged_when_not_settling():
    rng = np.random.default_rng(5)

    def run(periods, tstart):
        t = np.linspace(0, periods * T, 2000 * periods + 1)
        # an amplitude that keeps growing: never periodic
        x = (1 + t / T) * np.sin(2 * math.pi * F0 * t) + 1e-3 * rng.standard_normal(t.size)
        keep = t >= tstart
        return t[keep], {"out": x[keep]}, "synthetic-1"

    st = settle(run, fundamental_hz=F0, watch=watch,
                settings=SteadySettings(first_periods=12, max_periods=48),
                tmax=default_tmax(F0, 10), harmonics=5)
    assert not st.converged
    assert st.periods_simulated == 48
    assert st.drift > 1e-6


def test_next_period_count_follows_geometric_prediction():
    # drift 1e-3 shrinking by 0.5 per period: 10 more periods reach 1e-6; 20 % margin.
    assert next_period_count(12, 1e-3, 0.5, 1e-6, max_periods=2000) == 24
    assert next_period_count(12, 1e-3, 0.99, 1e-6, max_periods=2000) == 48  # capped at 4x
    assert next_period_count(12, math.inf, 1.0, 1e-6, max_periods=30) == 30


def test_default_tmax_scales_with_harmonics():
    assert default_tmax(50.0, 10) == pytest.approx(T / 2000)
    assert default_tmax(50.0, 40) == pytest.approx(T / 8000)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [({"tolerance": 0.0}, "tolerance"), ({"tolerance": float("nan")}, "tolerance"),
     ({"max_periods": 5}, "max periods"), ({"tmax": -1.0}, "TMAX"), ({"timeout": 0.0}, "timeout")],
)
def test_steady_settings_validation(kwargs, match):
    with pytest.raises(InputError, match=match):
        SteadySettings(**kwargs)
