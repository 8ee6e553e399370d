"""`bench compare` for a lift log: the measured lift current against the float lift model (generator/lift.py)
over the motion the log allows, per phase, as the drive's comparison does (hil/compare.py)."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from kinetab.generator import lift
from kinetab.generator.vehicle import Lift, Vehicle

from . import liftlog, liftplan
from .compare import stats


def band(lt: Lift, log: liftlog.LiftLog, m: liftlog.Motion) -> tuple[np.ndarray, np.ndarray, float]:
    """(lowest, highest) model current per row over the motion the log allows, and the speed margin, m/s:
    speeds from the filtered and the raw encoder speed (the filter smooths the stops, where a screw
    that back-drives poorly changes its current steeply with speed) widened by twice the encoder's scatter,
    the deadband and blend edges inside that range sampled too; accelerations between the setpoint's and
    the filtered."""
    margin = 2 * m.scatter_mps
    load, asked = log.setpoint["payload_kg"], log.setpoint["accel_mps2"]
    low, high = np.minimum(m.speed, log.speed) - margin, np.maximum(m.speed, log.speed) + margin
    speeds = [low, m.speed, log.speed, high]
    for edge in (lt.deadband_mps, lift.blend_width(lt)):
        for s in (-edge, 0.0, edge):
            speeds.append(np.where((low <= s) & (s <= high), s, m.speed))
    currents = [lift.motor_current(lt, load, s, a) for s in speeds for a in (asked, m.accel)]
    return np.min(currents, axis=0), np.max(currents, axis=0), margin


def compare(v: Vehicle, log: liftlog.LiftLog, *, tolerance_a: float | None = None) -> dict[str, Any]:
    """The comparison document (SI units, A). The verdict rests on the settled rows (liftlog.settled:
    filtered current against the model at the filtered motion, exact there); the rows where the kind of
    motion switches within the filter window (starts, stops, the load taking over the motor) are shown
    apart against the model's range over the motion the log allows (`band`), since a stop on a screw that
    back-drives poorly takes accelerations no filter follows."""
    lt = v.lift
    assert lt is not None
    m = liftlog.motion(log, lt.speed_lsb_mps)
    settled = liftlog.settled(lt, log, m)
    load, sp = log.setpoint["payload_kg"], log.setpoint
    residual = (m.current - lift.motor_current(lt, load, m.speed, m.accel))[settled]
    low, high, margin = band(lt, log, m)
    switching = log.valid & ~m.edge & ~settled
    at_setpoint = lift.motor_current(lt, load, sp["speed_mps"], sp["accel_mps2"])
    noise = liftlog.noise_floor(log)
    tol = tolerance_a if tolerance_a is not None else math.hypot(lt.current_budget_a, noise)
    whole = stats(residual)
    phases = log.phase[settled]
    return {
        "log": str(log.path),
        "axis": "lift",
        "rows": int(settled.sum()),
        "predicted_at": "the filtered motion (settled rows)",
        "speed_margin_mps": margin,
        "noise_floor_a": noise,
        "tolerance_a": tol,
        "tolerance_rule": "given by --tolerance"
        if tolerance_a is not None
        else "sqrt(lift.current_budget^2 + noise_floor^2), on the RMS residual of the settled rows",
        "passed": whole.rms <= tol,
        "lift": vars(whole),
        "switching": vars(stats((log.current - np.clip(log.current, low, high))[switching])),
        "at_setpoint": vars(stats((log.current - at_setpoint)[log.valid & ~m.edge])),
        "phases": {p: vars(stats(residual[phases == p])) for p in liftplan.PHASES if np.any(phases == p)},
    }


def text(doc: dict[str, Any]) -> str:
    """The comparison as a short table for the terminal."""
    lines = [
        f"{doc['log']} (lift, {doc['rows']} rows): measured lift current - model at {doc['predicted_at']}",
        f"{'':14}{'RMS':>9}{'max':>9}{'bias':>9}  [mA]",
    ]
    row = lambda name, d: f"{name:14}{d['rms'] * 1000:9.1f}{d['max'] * 1000:9.1f}{d['bias'] * 1000:9.1f}"  # noqa: E731
    lines.append(row("all", doc["lift"]))
    lines += [row(phase, d) for phase, d in doc["phases"].items()]
    lines.append(row("switching", doc["switching"]) + "  (not in the verdict)")
    lines.append(row("at setpoints", doc["at_setpoint"]))
    lines.append(
        "settled rows: filtered current against the model at the filtered motion (Savitzky-Golay weights); "
        f"switching rows ({doc['switching']['rows']}): the distance from the model's range over speeds "
        f"+-{doc['speed_margin_mps'] * 1000:.2f} mm/s around the filtered and raw speed and accelerations "
        "between the setpoint's and the filtered"
    )
    lines.append(
        f"noise floor {doc['noise_floor_a'] * 1000:.1f} mA; tolerance {doc['tolerance_a'] * 1000:.1f} mA "
        f"({doc['tolerance_rule']})"
    )
    lines.append("PASS" if doc["passed"] else "FAIL: the lift model does not match the bench within the tolerance")
    return "\n".join(lines)
