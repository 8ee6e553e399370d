"""Bench plans for the lift axis: strokes up and down at several speeds and accelerations with one load
on the carriage, jerk-limited, starting and ending with the carriage at rest where it started (the
bottom of its travel); the plan CSV (SI units, one row per control period, a phase per row) and the
checks a plan must pass before it is streamed."""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from kinetab.generator import interface, lift
from kinetab.generator.errors import UserError
from kinetab.generator.vehicle import Lift, Vehicle

from . import planfile

COLUMNS = ("t", *(f"lift_{c}" for c in interface.LIFT_IN.columns))
"""Time, then the lift's feed-forward inputs in SI units (m/s, m/s^2, kg), in the struct's order."""
PHASES = ("holding", "raising", "lowering")
STROKES = ((0.25, 0.5), (0.5, 1.0), (0.9, 0.75), (0.7, 0.3))
"""(fraction of lift.speed_max, fraction of lift.accel_max) of each stroke pair: slow and fast, gentle
and hard, so speed (viscous friction) and acceleration (inertia) vary independently."""
SMOOTH_S = 0.15  # accelerations ramp over this long (jerk-limited), so a speed loop can follow them
HOLD_S = 0.5  # at rest before, between and after strokes
STROKE_OF_TRAVEL = 0.8  # each stroke covers this much of lift.travel, or less:
CRUISE_S = 2.0  # no stroke cruises longer than this (a slow lift's plan stays minutes, not hours)
CURRENT_USE = 0.9  # a plan may ask for at most this much of lift.current_limit (as bench plan)


@dataclass(frozen=True)
class LiftPlan:
    """A lift test trajectory: SI columns keyed as COLUMNS, and a phase per row."""

    columns: dict[str, np.ndarray]
    phase: list[str]

    def __len__(self) -> int:
        return len(self.phase)

    def si(self) -> dict[str, np.ndarray]:
        """The setpoints keyed by the lift struct's SI names (interface.LIFT_IN.si_names)."""
        return {si: self.columns[f"lift_{c}"] for c, si in interface.LIFT_IN.si_names().items()}


def _stroke_accel(distance_m: float, speed_mps: float, accel_mps2: float, period_s: float) -> np.ndarray:
    """Acceleration per period of a rest-to-rest trapezoid (a triangle when the distance is short)."""
    top = min(speed_mps, float(np.sqrt(distance_m * accel_mps2)))
    ramp = max(1, math.ceil(top / accel_mps2 / period_s - 1e-9))  # never steeper than asked
    a = top / (ramp * period_s)
    cruise = max(0, int(round((distance_m - top * ramp * period_s) / (top * period_s))))
    return np.concatenate([np.full(ramp, a), np.zeros(cruise), np.full(ramp, -a)])


def _profile(lt: Lift, period_s: float) -> np.ndarray:
    """Accelerations of every stroke pair with rests between, smoothed to a jerk-limited profile (a
    moving average keeps every stroke's distance and peak acceleration)."""
    rest = np.zeros(int(round(HOLD_S / period_s)))
    parts = [rest]
    for speed, accel in STROKES:
        top, rate = speed * lt.speed_max_mps, accel * lt.accel_max_mps2
        distance = min(STROKE_OF_TRAVEL * lt.travel_m, top * CRUISE_S + top * top / rate)
        up = _stroke_accel(distance, top, rate, period_s)
        parts += [up, rest, -up, rest]
    width = max(1, int(round(SMOOTH_S / period_s)))
    return np.convolve(np.concatenate(parts), np.ones(width) / width)


def phase_of(speed: np.ndarray, lt: Lift) -> list[str]:
    """holding within the blend band of zero speed (where the efficiency changes over), else by direction."""
    w = lift.blend_width(lt)
    return ["holding" if abs(s) <= w else "raising" if s > 0 else "lowering" for s in speed]


def make_plan(v: Vehicle, *, period_s: float, payload_kg: float) -> LiftPlan:
    """The lift plan at one load on the carriage (a person changes the load between plans)."""
    lt = _lift(v, "bench plan --axis lift")
    if not 0 <= payload_kg <= lt.payload_max_kg:
        raise UserError(
            f"bench plan: --lift-payload: expected 0 .. lift.payload_max ({lt.payload_max_kg:g} kg), "
            f"found {payload_kg:g} kg"
        )
    accel = _profile(lt, period_s)
    speed = np.cumsum(accel) * period_s  # the speed where each period ends (the setpoint convention)
    accel[np.abs(accel) < 1e-9 * lt.accel_max_mps2] = 0.0  # rests are exactly at rest (sums leave 1e-17)
    speed[np.abs(speed) < 1e-9 * lt.speed_max_mps] = 0.0
    n = len(accel)
    cols = dict(zip(COLUMNS, (np.arange(n) * period_s, speed, accel, np.full(n, payload_kg))))
    return LiftPlan(cols, phase_of(speed, lt))


def _lift(v: Vehicle, where: str) -> Lift:
    if v.lift is None:
        raise UserError(f"{where}: the model has no [lift] section")
    return v.lift


def positions(plan: LiftPlan) -> np.ndarray:
    """Carriage height over the start, m, at the end of each period."""
    return np.cumsum(plan.columns["lift_speed"]) * (period_s(plan) or 0.0)


def plan_problem(v: Vehicle, plan: LiftPlan) -> str | None:
    """Why the plan must not be streamed as it is: beyond the lift's speed, acceleration, load or travel,
    or asking for more than CURRENT_USE of its current limit or more than its supply voltage."""
    lt = _lift(v, "bench run")
    si = plan.si()
    speed, accel, load = si["speed_mps"], si["accel_mps2"], si["payload_kg"]
    height = positions(plan)
    current = lift.motor_current(lt, load, speed, accel)
    peak = float(np.max(np.abs(current)))
    volts = float(np.max(np.abs(lift.motor_voltage(lt, current, speed))))
    supply = lift.supply_voltage(v, lt)
    edge = 1 + 1e-9  # the plan's printed digits
    checks = [
        (np.max(np.abs(speed)) > lt.speed_max_mps * edge, f"speed beyond lift.speed_max {lt.speed_max_mps:g} m/s"),
        (np.max(np.abs(accel)) > lt.accel_max_mps2 * edge, f"accel beyond lift.accel_max {lt.accel_max_mps2:g} m/s^2"),
        (np.min(load) < 0 or np.max(load) > lt.payload_max_kg, f"load outside 0 .. {lt.payload_max_kg:g} kg"),
        (np.min(height) < -1e-6 or np.max(height) > lt.travel_m, f"carriage beyond its travel {lt.travel_m:g} m"),
        (peak > CURRENT_USE * lt.current_limit_a, f"lift current {peak:.2f} A, above {CURRENT_USE:.0%} of the limit"),
        (volts > supply, f"lift voltage {volts:.2f} V above the supply {supply:g} V"),
    ]
    found = [text for bad, text in checks if bad]
    return "; ".join(found) if found else None


def to_csv(plan: LiftPlan) -> str:
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow([*COLUMNS, planfile.PHASE_COLUMN])
    for k in range(len(plan)):
        writer.writerow([f"{plan.columns[c][k]:.9g}" for c in COLUMNS] + [plan.phase[k]])
    return buf.getvalue()


def is_lift_header(path: Path) -> bool:
    """True when the file's first line is a lift plan's header (bench run streams it to the lift)."""
    return planfile.header_starts(path, COLUMNS[:2])


def read_plan(path: Path) -> LiftPlan:
    """Read a lift plan CSV; a problem is one UserError naming the file, line and column."""
    rows = planfile.csv_rows(path, "plan")
    header = [c.strip() for c in rows[0]] if rows else []
    if header not in (list(COLUMNS), [*COLUMNS, planfile.PHASE_COLUMN]):
        raise UserError(f"{path}:1: expected the header {','.join(COLUMNS)}[,{planfile.PHASE_COLUMN}]")
    values, phases = [], []
    for line, row in enumerate(rows[1:], start=2):
        if row:
            values.append(planfile.numbers(path, line, row, COLUMNS, width=len(header)))
            phases.append(
                planfile.phase_label(path, line, row[len(COLUMNS)], PHASES) if len(header) > len(COLUMNS) else ""
            )
    if not values:
        raise UserError(f"{path}: the plan has no rows")
    data = np.array(values)
    planfile.check_time(path, data[:, 0])
    return LiftPlan({c: data[:, k] for k, c in enumerate(COLUMNS)}, phases)


def period_s(plan: LiftPlan) -> float | None:
    t = plan.columns["t"]
    return float(t[1] - t[0]) if len(t) > 1 else None


def steps(v: Vehicle, plan: LiftPlan, source: Path) -> np.ndarray:
    """The plan in the lift's firmware steps, one LIFT_IN row per setpoint (one line naming the column
    if it cannot be)."""
    try:
        fields = interface.to_steps(v, interface.LIFT_IN, plan.si())
    except ValueError as exc:
        raise UserError(f"{source}: {exc}") from None
    return interface.fields_to_rows(interface.LIFT_IN, fields).astype(np.int64)
