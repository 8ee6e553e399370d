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


def write_lift_log(log: liftlog.LiftLog, path: Path, model: Vehicle) -> Path:
    """LOG.csv and LOG.json as `bench run` writes them for a lift plan (status 'measured')."""
    import csv
    import json

    from kinetab.generator import synthesis
    from kinetab.hil import messages

    si = [log.setpoint[k] for k in ("speed_mps", "accel_mps2", "payload_kg")]
    with path.open("w", newline="") as fh:
        out = csv.writer(fh, lineterminator="\n")
        out.writerow(liftlog.COLUMNS)
        for k in range(len(log)):
            nums = [*(c[k] for c in si), log.ff[k], log.current[k], log.speed[k]]
            out.writerow(
                [f"{log.t[k]:.6f}", k + 1, log.phase[k], *(f"{x:.9g}" for x in nums), messages.STATUS_MEASURED, 0]
            )
    doc = {
        "model_name": model.name,
        "fingerprint": f"0x{synthesis.fingerprint(model):08X}",
        "rows": len(log),
        "samples": len(log),
        "log_rows": len(log),
        "axis": "lift",
        "ended": "completed",
    }
    path.with_suffix(".json").write_text(json.dumps(doc, indent=2) + "\n")
    return path


def feasible_lift_doc(seed: int, name: str = "hoist", *, buildable: bool = False) -> dict:
    """An invented vehicle (tests/helpers.invented, or invented_feasible when it must build) with an invented lift
    (tests/test_lift.random_lift) whose current limit and own supply are 30 % above its envelope's peaks."""
    from kinetab.generator import lift as liftphysics

    from tests.helpers import invented, invented_feasible, vehicle_from
    from tests.test_lift import random_lift

    doc, _ = (invented_feasible if buildable else invented)(seed, name)  # feasible: slower, for `build`
    for attempt in range(100):  # the ranges allow a motor spun past any real supply: draw again
        doc["lift"] = random_lift(np.random.default_rng(1000 * seed + attempt))
        report = liftphysics.analyse(vehicle_from(doc))
        assert report is not None
        if report.peak_voltage.value < 400 and report.peak_current.value < 150:
            doc["lift"]["current_limit"] = f"{1.3 * report.peak_current.value:.4f} A"
            doc["lift"]["supply_voltage"] = f"{1.3 * report.peak_voltage.value:.4f} V"
            return doc
    raise AssertionError(f"no invented lift below 400 V and 150 A in 100 draws (seed {seed})")


def changed_truth(doc: dict, rng: np.random.Generator) -> dict:
    """The same vehicle with the lift's fitted parameters changed by 10-30 % (efficiencies kept below 1)."""
    import copy

    from tests.helpers import vehicle_from

    truth = copy.deepcopy(doc)
    lt = vehicle_from(doc).lift
    assert lt is not None
    sign = lambda: rng.choice([-1.0, 1.0])  # noqa: E731
    change = lambda x: x * (1 + sign() * rng.uniform(0.1, 0.3))  # noqa: E731
    weight = (lt.carriage_mass_kg + lt.payload_max_kg) * 9.80665
    section = truth["lift"]
    section["carriage_mass"] = f"{change(lt.carriage_mass_kg)} kg"
    section["assist_force"] = f"{lt.assist_force_n + sign() * rng.uniform(0.05, 0.15) * weight} N"
    section["coulomb"] = f"{change(max(lt.coulomb_n, 5.0))} N"
    section["viscous"] = f"{change(max(lt.viscous_ns_per_m, 10.0))} N*s/m"
    section["efficiency"] = min(0.97, change(lt.efficiency))
    section["backdrive_efficiency"] = min(0.97, change(lt.backdrive_efficiency))
    return truth
