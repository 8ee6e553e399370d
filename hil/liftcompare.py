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
    """(lowest, highest) model current per row over speeds within twice the encoder scatter of the smoothed
    speed (the deadband and blend edges inside that range sampled too) and accelerations between the
    setpoint's and the measured; and that speed margin, m/s."""
    margin = 2 * m.scatter_mps
    load, asked = log.setpoint["payload_kg"], log.setpoint["accel_mps2"]
    speeds = [m.speed - margin, m.speed, m.speed + margin]
    for edge in (lt.deadband_mps, lift.blend_width(lt)):
        for s in (-edge, 0.0, edge):
            inside = np.abs(m.speed - s) <= margin
            speeds.append(np.where(inside, s, m.speed))
    currents = [lift.motor_current(lt, load, s, a) for s in speeds for a in (asked, m.accel)]
    return np.min(currents, axis=0), np.max(currents, axis=0), margin


def compare(v: Vehicle, log: liftlog.LiftLog, *, tolerance_a: float | None = None) -> dict[str, Any]:
    """The comparison document (SI units, A), with the drive comparison's main fields."""
    lt = v.lift
    assert lt is not None
    m = liftlog.motion(log)
    low, high, margin = band(lt, log, m)
    ok = log.valid & ~m.edge
    residual = (log.current - np.clip(log.current, low, high))[ok]
    at_setpoint = lift.motor_current(
        lt, log.setpoint["payload_kg"], log.setpoint["speed_mps"], log.setpoint["accel_mps2"]
    )
    noise = liftlog.noise_floor(log)
    tol = tolerance_a if tolerance_a is not None else math.hypot(lt.current_budget_a, noise)
    whole = stats(residual)
    phases = log.phase[ok]
    return {
        "log": str(log.path),
        "axis": "lift",
        "rows": int(ok.sum()),
        "predicted_at": "the measured motion within its uncertainty",
        "speed_margin_mps": margin,
        "noise_floor_a": noise,
        "tolerance_a": tol,
        "tolerance_rule": "given by --tolerance"
        if tolerance_a is not None
        else "sqrt(lift.current_budget^2 + noise_floor^2), on the RMS residual",
        "passed": whole.rms <= tol,
        "lift": vars(whole),
        "at_setpoint": vars(stats((log.current - at_setpoint)[ok])),
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
    lines.append(row("at setpoints", doc["at_setpoint"]))
    lines.append(
        f"model range: speeds within +-{doc['speed_margin_mps'] * 1000:.2f} mm/s of the smoothed measured speed, "
        "accelerations between the setpoint's and the measured; the residual is the distance from it"
    )
    lines.append(
        f"noise floor {doc['noise_floor_a'] * 1000:.1f} mA; tolerance {doc['tolerance_a'] * 1000:.1f} mA "
        f"({doc['tolerance_rule']})"
    )
    lines.append("PASS" if doc["passed"] else "FAIL: the lift model does not match the bench within the tolerance")
    return "\n".join(lines)
