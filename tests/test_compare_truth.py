"""bench compare passes the vehicle that made the log and fails one that did not, on logs whose motion
is not the plan's: a feed-forward from a wrong model leaves the speed loop to correct, and a quantised
encoder measures the speeds. Vehicles and truths are drawn at random (tests.test_identify's ranges),
with both deadband shapes; the logs come from the bench plant in-process (tests.benchsim)."""

from __future__ import annotations

import dataclasses

import pytest
from kinetab.hil import campaign, compare

from tests.benchsim import run_plan
from tests.test_identify import changed, random_model


@pytest.mark.parametrize(
    ("seed", "shape", "rig"), [(41, "ramp", "on-floor"), (42, "gap", "on-floor"), (43, "gap", "wheels-up")]
)
def test_the_true_vehicle_passes_and_the_model_that_missed_it_fails(seed, shape, rig):
    _, v, rng = random_model(seed)
    v = dataclasses.replace(v, friction=dataclasses.replace(v.friction, deadband_shape=shape))
    truth, _ = changed(v, rng)  # eight parameters 10-30 % off
    plan = campaign.plan_for(v, campaign.Candidate(rig, 0.0, 0.0), duration_s=10, period_s=0.001)
    noise = 0.01 * v.drive.current_limit_a
    (log,) = run_plan(v, truth, plan, rig=rig, noise_a=noise, seed=seed)
    right = compare.compare(truth, log)
    assert right["passed"], {s: w["rms"] for s, w in right["wheels"].items()}
    wrong = compare.compare(v, log)
    assert not wrong["passed"], {s: w["rms"] for s, w in wrong["wheels"].items()}


@pytest.mark.parametrize(
    ("seed", "rig", "loaded"), [(41, "wheels-up", False), (43, "on-floor", True), (43, "wheels-up", False)]
)
def test_the_true_vehicle_passes_with_a_quiet_current_sensor(seed, rig, loaded):
    """20 mA of current noise, the log made by the very model compared: it must pass. Where a wheel's
    acceleration changes fast (a lifted wheel, a wheel that cannot follow its setpoint in a turn) the
    0.1 s derivative lagged it and the band missed: these failed at 1.25, 1.30 and 1.42 times the
    tolerance; with the shorter windows where they depart (compare._accel_range) 0.50, 0.42 and 0.70."""
    _, v, _ = random_model(seed)
    payload = v.payload.mass_max_kg if loaded else 0.0
    plan = campaign.plan_for(v, campaign.Candidate(rig, payload, 0.0), duration_s=10, period_s=0.001)
    (log,) = run_plan(v, v, plan, rig=rig, noise_a=0.02, seed=seed)
    doc = compare.compare(v, log)
    assert doc["passed"], {s: w["rms"] for s, w in doc["wheels"].items()}


def test_a_log_shorter_than_the_derivative_window_is_compared():
    """70 rows at 1 ms (the loader takes 50 and up) against the 0.1 s (101-sample) Savitzky-Golay window:
    the window shrinks to the log (it was scipy's ValueError, a traceback on the command line), and the
    very model that made the log passes."""
    _, v, _ = random_model(41)
    plan = campaign.plan_for(v, campaign.Candidate("wheels-up", 0.0, 0.0), duration_s=5, period_s=0.001)
    (log,) = run_plan(v, v, plan, rig="wheels-up", noise_a=0.02, seed=41)
    cut = slice(1000, 1070)  # moving: the plan starts at rest
    short = dataclasses.replace(
        log,
        t=log.t[cut],
        phase=log.phase[cut],
        setpoint={k: x[cut] for k, x in log.setpoint.items()},
        ff=log.ff[cut],
        current=log.current[cut],
        speed=log.speed[cut],
        valid=log.valid[cut],
    )
    doc = compare.compare(v, short)
    assert doc["rows"] == 70 and doc["passed"], {s: w["rms"] for s, w in doc["wheels"].items()}
