"""Bench logs made in-process and faster than real time, for the fit's tests: the simulated
controller's plant (hil.plant: PI speed loop, saturating drive, current noise, quantised encoder) runs a
plan tick by tick, `batch` independent copies at once (same truth, own noise); measured speeds are
rounded to the firmware's speed step, as the simulated controller reports them. The feed-forward is the
model's float current rounded to the firmware's current step (the generated C agrees with it within the
current budget; the end-to-end tests run the real C), or none."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from kinetab.generator import dynamics
from kinetab.generator.vehicle import Vehicle
from kinetab.hil import benchdata, planfile
from kinetab.hil.plant import Plant, PlantOptions


def run_plan(
    model: Vehicle,
    truth: Vehicle,
    plan: planfile.Plan,
    *,
    rig: str,
    noise_a: float = 0.02,
    encoder_counts: int = 4096,
    feedforward: bool = True,
    batch: int = 1,
    seed: int = 1,
    name: str = "log",
) -> list[benchdata.BenchLog]:
    """One BenchLog per copy: the plan's setpoints, the feed-forward sent, measured currents and speeds."""
    c = plan.columns
    n = len(plan)
    period = float(c["t"][1] - c["t"][0])
    opts = PlantOptions(
        period_s=period, rig=rig, current_noise_a=noise_a, encoder_counts=encoder_counts, seed=seed, batch=batch
    )
    plant = Plant(truth, opts)
    si = plan.si()
    op = dynamics.OperatingPoint(**si)
    ff = np.zeros((n, 2))
    if feedforward:
        ff = np.round(dynamics.wheel_currents(model, op) / model.firmware.current_lsb_a) * model.firmware.current_lsb_a
    current, speed = np.zeros((n, batch, 2)), np.zeros((n, batch, 2))
    for k in range(n):
        plant.step({key: float(val[k]) for key, val in si.items()}, ff[k])
        current[k], speed[k] = plant.measure()
    lsb = model.firmware.speed_lsb_mps  # a controller reports speed in the firmware's steps (stepdrive.py)
    speed = np.round(speed / lsb) * lsb
    logs = []
    for b in range(batch):
        logs.append(
            benchdata.BenchLog(
                path=Path(f"{name}_{b}.csv"),
                rig=rig,
                t=c["t"],
                phase=np.array(plan.phase),
                setpoint={key: np.asarray(val, float) for key, val in si.items()},
                ff=ff,
                current=current[:, b],
                speed=speed[:, b],
                valid=np.ones(n, dtype=bool),
            )
        )
    return logs


def write_log(log: benchdata.BenchLog, path: Path, model: Vehicle, **meta: object) -> Path:
    """LOG.csv and LOG.json as `bench run` writes them (setpoints as given, status 'measured')."""
    import csv
    import json

    from kinetab.generator import synthesis
    from kinetab.hil import messages
    from kinetab.hil.benchlog import LOG_COLUMNS
    from kinetab.hil.planfile import PLAN_COLUMNS, SI_NAME

    with path.open("w", newline="") as fh:
        out = csv.writer(fh, lineterminator="\n")
        out.writerow(LOG_COLUMNS)
        for k in range(len(log)):
            sp = [log.setpoint[SI_NAME[c]][k] for c in PLAN_COLUMNS[1:]]
            nums = [*sp, *log.ff[k], *log.current[k], *log.speed[k]]
            out.writerow(
                [f"{log.t[k]:.6f}", k + 1, log.phase[k], *(f"{x:.9g}" for x in nums), messages.STATUS_MEASURED, 0]
            )
    doc = {
        "model": str(model.source),
        "model_name": model.name,
        "fingerprint": f"0x{synthesis.fingerprint(model):08X}",
        "rows": len(log),
        "samples": len(log),
        "rig": log.rig,
        "ended": "completed",
        **meta,
    }
    path.with_suffix(".json").write_text(json.dumps(doc, indent=2) + "\n")
    return path
