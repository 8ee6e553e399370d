"""Lift logs made in-process and faster than real time, for the lift fit's tests: the simulated
controller's lift plant (hil.liftplant: PI speed loop, current limit and supply, current noise, quantised
encoder) runs a lift plan tick by tick, as tests/benchsim.py does for the drive. The feed-forward is the
model's float current rounded to the lift's current step (the generated C agrees with it within
lift.current_budget; the end-to-end test runs the real C)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from kinetab.generator import lift
from kinetab.generator.vehicle import Vehicle
from kinetab.hil import liftlog, liftplan
from kinetab.hil.liftplant import LiftPlant
from kinetab.hil.plant import PlantOptions


def run_lift_plan(
    model: Vehicle,
    truth: Vehicle,
    plan: liftplan.LiftPlan,
    *,
    noise_a: float = 0.02,
    encoder_counts: int = 4096,
    seed: int = 1,
    name: str = "lift",
) -> liftlog.LiftLog:
    assert model.lift is not None and truth.lift is not None
    si = plan.si()
    n = len(plan)
    period = float(plan.columns["t"][1] - plan.columns["t"][0])
    opts = PlantOptions(period_s=period, current_noise_a=noise_a, encoder_counts=encoder_counts, seed=seed)
    plant = LiftPlant.of(truth, opts)
    speed, accel, load = si["speed_mps"], si["accel_mps2"], si["payload_kg"]
    step = model.lift.current_lsb_a
    ff = np.round(lift.motor_current(model.lift, load, speed, accel) / step) * step
    current, measured = np.zeros(n), np.zeros(n)
    for k in range(n):
        plant.step(float(speed[k]), float(accel[k]), float(load[k]), float(ff[k]))
        current[k], measured[k] = plant.measure()
    return liftlog.LiftLog(
        path=Path(f"{name}_{seed}.csv"),
        t=plan.columns["t"],
        phase=np.array(plan.phase),
        setpoint={k: np.asarray(v, float) for k, v in si.items()},
        ff=ff,
        current=current,
        speed=measured,
        valid=np.ones(n, dtype=bool),
    )
