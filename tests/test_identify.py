"""Parameter identification and comparison on logs made from the float model itself (no processes):
the least-squares core against reference libraries, the derivative filter against an analytic signal,
and what the fit does with parameters a log does not excite or cannot tell apart."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from kinetab.generator import dynamics, model
from kinetab.hil import benchdata, compare, identify, planner
from scipy.optimize import lsq_linear

from tests.helpers import DEMO_PATH


def synthetic_log(truth, rig: str, *, seconds: float = 20, noise: float = 0.02, seed: int = 1, payload: float = 0.0):
    """A bench log as the float model of `truth` would produce it, measured perfectly but for current
    noise: the plan's motion, its currents."""
    plan = planner.make_plan(truth, duration_s=seconds, period_s=0.001, rig=rig, payload=payload)
    c = plan.columns
    speed = np.column_stack([c["speed_right"], c["speed_left"]])
    accel = np.column_stack([c["accel_right"], c["accel_left"]])
    op = dynamics.OperatingPoint(
        c["payload"], speed[:, 0], speed[:, 1], accel[:, 0], accel[:, 1], c["pitch"], c["roll"]
    )
    current = benchdata.predicted_current(truth, op, rig)
    current = current + np.random.default_rng(seed).normal(0, noise, current.shape)
    setpoint = {
        benchdata_name: c[col]
        for col, benchdata_name in (
            ("speed_right", "speed_right"),
            ("speed_left", "speed_left"),
            ("accel_right", "accel_right"),
            ("accel_left", "accel_left"),
            ("pitch", "pitch_rad"),
            ("roll", "roll_rad"),
            ("payload", "payload_kg"),
        )
    }
    return benchdata.BenchLog(
        Path(f"{rig}.csv"),
        rig,
        c["t"],
        np.array(plan.phase),
        setpoint,
        current,
        current,
        speed,
        np.ones(len(plan), dtype=bool),
    )


def _changed(v, **scale):
    out = v
    for name, factor in scale.items():
        p = next(p for p in identify.PARAMS if p.name == name.replace("__", "."))
        out = p.put(out, p.get(out) * factor)
    return out


@pytest.fixture(scope="module")
def demo():
    return model.load(DEMO_PATH)


def test_least_squares_step_equals_numpy_and_scipy():
    """The normalised-column solve against numpy.linalg.lstsq and scipy.optimize.lsq_linear."""
    rng = np.random.default_rng(4)
    x = rng.normal(size=(500, 4)) * np.array([1e3, 1.0, 1e-3, 10.0])
    y = x @ np.array([0.5, -2.0, 300.0, 0.01]) + rng.normal(0, 0.1, 500)
    ours = identify._step(x, y, robust=False)
    assert ours == pytest.approx(np.linalg.lstsq(x, y, rcond=None)[0], rel=1e-9)
    assert ours == pytest.approx(lsq_linear(x, y, tol=1e-14).x, rel=1e-6)


def test_standard_errors_equal_statsmodels_ols():
    """sqrt(diag(sigma^2 (X^T X)^-1)) with sigma^2 = RSS/(n - p) (Draper & Smith, Applied Regression
    Analysis, ch. 5, from memory), against statsmodels' OLS standard errors."""
    rng = np.random.default_rng(5)
    x = rng.normal(size=(300, 3))
    y = x @ np.array([1.0, 2.0, -1.0]) + rng.normal(0, 0.5, 300)
    coef = np.linalg.lstsq(x, y, rcond=None)[0]
    ours = identify.standard_errors(x, y - x @ coef)
    assert ours == pytest.approx(sm.OLS(y, x).fit().bse, rel=1e-10)


def test_savitzky_golay_acceleration_of_an_analytic_signal(demo):
    """d/dt of 0.3 sin(2 pi 0.5 t) is 0.3 pi cos(pi t): the filter's derivative within 0.5 % of the peak."""
    t = np.arange(0, 6, 0.001)
    speed = 0.3 * np.sin(np.pi * t)
    both = np.column_stack([speed, speed])
    zero = np.zeros_like(t)
    log = benchdata.BenchLog(
        Path("sine.csv"),
        "on-floor",
        t,
        np.array(["cruising"] * len(t)),
        {
            "speed_right": zero,
            "speed_left": zero,
            "accel_right": zero,
            "accel_left": zero,
            "pitch_rad": zero,
            "roll_rad": zero,
            "payload_kg": zero,
        },
        both,
        both,
        both,
        np.ones(len(t), dtype=bool),
    )
    accel, how = benchdata.accelerations(demo, log)  # the setpoint (zero) is far off: not tight
    assert how.startswith("Savitzky-Golay")
    inner = slice(100, -100)
    assert np.max(np.abs(accel[inner, 0] - 0.3 * np.pi * np.cos(np.pi * t[inner]))) < 0.005 * 0.3 * np.pi


def test_fit_recovers_a_changed_vehicle_from_both_rigs(demo):
    truth = _changed(demo, body__mass=1.15, body__yaw_inertia=1.15 * 1.21, friction__coulomb=0.8, friction__viscous=1.3)
    logs = [synthetic_log(truth, "wheels-up", seed=2), synthetic_log(truth, "on-floor", seed=3)]
    result = identify.fit(demo, logs)
    for name in ("body.mass", "body.yaw_inertia", "friction.coulomb", "friction.viscous"):
        true = next(p for p in identify.PARAMS if p.name == name).get(truth)
        assert result.estimates[name][1] == pytest.approx(true, rel=0.01), name
    assert result.rms_after_n < result.rms_before_n


def test_a_parameter_the_log_does_not_excite_is_named_and_left_alone(demo):
    """Wheels up, the body is not moved: its mass and inertia are not excited; nothing is written for them."""
    result = identify.fit(demo, [synthetic_log(demo, "wheels-up")])
    held = {n for h in result.held for n in h.names}
    assert {"body.mass", "body.yaw_inertia", "wheels.rolling_resistance"} <= held
    assert "body.mass" not in identify.model_changes(result)
    assert all("not excited" in h.why for h in result.held if "body.mass" in h.names)


def test_collinear_coulomb_and_rolling_resistance_are_named_with_their_sum(demo):
    """On a level floor at one payload, Coulomb friction and rolling resistance both act as a constant
    force against the motion: the fit names the group and the identifiable combination, and holds it."""
    no_stribeck = dataclasses.replace(
        demo, friction=dataclasses.replace(demo.friction, breakaway_n=demo.friction.coulomb_n)
    )
    result = identify.fit(no_stribeck, [synthetic_log(no_stribeck, "on-floor")])
    groups = [set(h.names) for h in result.held]
    assert any({"friction.coulomb", "wheels.rolling_resistance"} <= g for g in groups)
    text = next(h.why for h in result.held if "friction.coulomb" in h.names)
    assert "only friction.coulomb" in text and "identifiable" in text
    assert "friction.coulomb" not in identify.model_changes(result)


def test_compare_passes_the_right_model_and_fails_a_wrong_one(demo):
    log = synthetic_log(demo, "on-floor", seconds=10)
    right = compare.compare(demo, log)
    assert right["passed"] and right["wheels"]["right"]["rms"] < 1.2 * right["noise_floor_a"]
    heavy = _changed(demo, body__mass=1.3)
    wrong = compare.compare(heavy, log)
    assert not wrong["passed"] and wrong["likely_terms"][0]["term"] in ("inertia", "gravity", "rolling")


def test_plan_for_fit_is_no_worse_conditioned_than_the_default(demo):
    """--for-fit picks, among the default and perturbed plans, the most parameters told apart and then
    the smallest condition number (the optimal-excitation criterion; Gautier and Khalil, from memory)."""
    from kinetab.hil import excite

    default = planner.make_plan(demo, duration_s=20, period_s=0.001, rig="on-floor")
    cond_default, names_default = excite.condition(demo, default, "on-floor")
    chosen, cond = excite.plan_for_fit(demo, duration_s=20, period_s=0.001, rig="on-floor", payload=0.0)
    _, names = excite.condition(demo, chosen, "on-floor")
    assert len(names) >= len(names_default) and (len(names) > len(names_default) or cond <= cond_default)
    assert {"body.mass", "body.yaw_inertia", "friction.viscous"} <= set(names)
