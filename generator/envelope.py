"""Operating envelope: gradeability, acceleration on the steepest pitch, peak current and voltage.

Traction demand at a contact is the rim force less what stays inside the wheel (drivetrain friction
and the reflected wheel/rotor inertia); the traction limit per wheel is grip * N_drive / 2.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike

from . import dynamics, interface, model, region
from . import lift as lift_axis
from .dynamics import OperatingPoint
from .interface import FF_IN
from .vehicle import Vehicle

PAYLOAD_STEPS = 5  # empty, quarter, half, three quarters, full
PITCH_CEILING = math.radians(44.9)


@dataclass(frozen=True)
class Margins:
    """Worst use of each limit over a set of operating points: 1.0 means exactly at the limit."""

    current: np.ndarray
    traction: np.ndarray
    voltage: np.ndarray
    tipping: np.ndarray  # > 0 when a wheel or caster load is <= 0

    def ok(self) -> np.ndarray:
        return (self.current <= 1) & (self.traction <= 1) & (self.voltage <= 1) & (self.tipping <= 0)


@dataclass(frozen=True)
class PayloadRow:
    payload_kg: float
    hold_pitch_rad: float
    climb_pitch_rad: float
    accel_on_pitch_max_mps2: float


@dataclass(frozen=True)
class Peak:
    value: float
    where: str


@dataclass(frozen=True)
class EnvelopeReport:
    rows: list[PayloadRow]
    peak_current: Peak
    peak_voltage: Peak
    peak_traction: Peak  # fraction of the grip limit used
    problems: list[str] = field(default_factory=list)
    lift: lift_axis.LiftReport | None = None  # the lift's lines, when the vehicle has one

    @property
    def feasible(self) -> bool:
        return not self.problems


def margins(v: Vehicle, op: OperatingPoint) -> tuple[Margins, Margins]:
    """Per-wheel limit use (current, traction, voltage, tipping) at the operating points."""
    right, left = dynamics.wheel_forces(v, op)
    drive_load, _ = dynamics.wheel_loads(v, op.payload_kg, op.pitch_rad, op.roll_rad)
    tip = dynamics.tipping(v, op.payload_kg, op.pitch_rad, op.roll_rad)
    out = []
    for side, speed, accel in ((right, op.speed_right, op.accel_right), (left, op.speed_left, op.accel_left)):
        current = dynamics.motor_current(v, side.total, speed)
        voltage = dynamics.motor_voltage(v, current, speed)
        out.append(
            Margins(
                current=np.abs(current) / v.drive.current_limit_a,
                traction=dynamics.traction_use(v, side, accel, drive_load),
                voltage=np.abs(voltage) / v.drive.supply_voltage_v,
                tipping=tip,
            )
        )
    return out[0], out[1]


def _straight(
    v: Vehicle, payload: float, pitch: ArrayLike, roll: np.ndarray, *, accel: ArrayLike, speeds: np.ndarray
) -> np.ndarray:
    """Per candidate (pitch, accel) pair: driving straight at every speed and roll stays within limits."""
    th, a, s, r = np.meshgrid(np.atleast_1d(pitch), np.atleast_1d(accel), speeds, roll, indexing="ij", sparse=False)
    op = OperatingPoint(
        speed_right=s, speed_left=s, accel_right=a, accel_left=a, pitch_rad=th, roll_rad=r, payload_kg=payload
    )
    ok = np.ones(th.shape, dtype=bool)
    for m in margins(v, op):
        ok &= m.ok()
    return ok.all(axis=(2, 3)).ravel()


def _largest(ok: Callable[[np.ndarray], np.ndarray], hi: float, steps: int = 64, rounds: int = 4) -> float:
    """Largest x in [0, hi] with ok(x) (ok is vectorised and monotone); -1 when even ok(0) fails.

    A grid of `steps` points, then the bracket of the last passing point again, `rounds` times:
    resolution hi / steps^rounds (1e-8 of the range), in a handful of vectorised calls."""
    if not ok(np.array([0.0]))[0]:
        return -1.0
    lo_x = 0.0
    for first in [True] + [False] * (rounds - 1):
        grid = np.linspace(lo_x, hi, steps + 1)
        passed = ok(grid)
        if passed.all():
            return float(hi) if first else lo_x  # later rounds: hi failed before, keep the known pass
        k = int(np.argmin(passed))  # first failing point
        if k == 0:
            return lo_x
        lo_x, hi = float(grid[k - 1]), float(grid[k])
    return lo_x


def straight_limits(v: Vehicle) -> tuple[float, float]:
    """The fastest and the hardest the vehicle drives straight ahead (equal wheels) inside the region,
    m/s and m/s^2: each wheel's edge, or the forward limit when that is lower."""
    speeds, accels = region.speed_region(v), region.accel_region(v)
    return min(speeds.edge, speeds.sum_max / 2), min(accels.edge, accels.sum_max / 2)


def _speed_sweep(v: Vehicle) -> np.ndarray:
    db = v.friction.deadband_mps
    return np.unique(np.concatenate([np.linspace(0, straight_limits(v)[0], 41), [db, 1.001 * db]]))


def payload_row(v: Vehicle, payload: float) -> PayloadRow:
    env = v.envelope
    roll = np.array([-env.roll_max_rad, 0.0, env.roll_max_rad])
    accel_max = straight_limits(v)[1]
    speeds = _speed_sweep(v)
    still = np.array([0.0])
    hold = _largest(
        lambda th: (
            _straight(v, payload, th, roll, accel=0.0, speeds=still)
            & _straight(v, payload, -th, roll, accel=0.0, speeds=still)
        ),
        PITCH_CEILING,
    )
    climb = _largest(lambda th: _straight(v, payload, th, roll, accel=accel_max, speeds=speeds), PITCH_CEILING)
    accel = _largest(lambda a: _straight(v, payload, env.pitch_max_rad, roll, accel=a, speeds=speeds), 50.0)
    return PayloadRow(payload_kg=payload, hold_pitch_rad=hold, climb_pitch_rad=climb, accel_on_pitch_max_mps2=accel)


def _corner_values(v: Vehicle, m: interface.Member) -> tuple[float, ...]:
    """The values an input takes at the corners: its envelope edges and zero (speeds also the deadband edges)."""
    edge = float(model.value(v, m.edge_key))
    values: tuple[float, ...] = (-edge, 0.0, edge) if m.signed else (0.0, edge)
    if m is interface.SPEED:
        db = v.friction.deadband_mps
        values = (-edge, -db, 0.0, db, edge)
    return values


def _pair_corners(v: Vehicle, m: interface.Member) -> np.ndarray:
    """Corner pairs (k, 2) of a wheel pair: every pair of its corner values moved into the region, then the
    region's own vertices (region.py); the same pairs in the same order as before when it is a box."""
    values = _corner_values(v, m)
    reg = region.speed_region(v) if m is interface.SPEED else region.accel_region(v)
    pairs = np.array(list(itertools.product(values, values)))
    right, left = region.clamp(pairs[:, 0], pairs[:, 1], reg, integer=False)
    found: list[tuple[float, float]] = []
    for pair in [*zip(right.tolist(), left.tolist()), *map(tuple, region.vertices(reg).tolist())]:
        if pair not in found:
            found.append(pair)
    return np.array(found)


def _corners(v: Vehicle) -> tuple[OperatingPoint, np.ndarray]:
    """Every combination of the corner values of every input (wheel pairs: their corner pairs inside the
    region): the operating points and, per point, the row of SI values in struct order."""
    axes: list[list[tuple[float, ...]]] = []
    for m in FF_IN.members:
        if m.count == 2:
            axes.append([tuple(p) for p in _pair_corners(v, m)])
        else:
            axes.append([(x,) for x in _corner_values(v, m)])
    pts = np.array([sum(combo, ()) for combo in itertools.product(*axes)])
    op = OperatingPoint(**{name: pts[:, k] for k, name in enumerate(FF_IN.si_names().values())})
    return op, pts


def _describe_corner(row: np.ndarray, wheel: str) -> str:
    si = {name: float(x) for name, x in zip(FF_IN.si_names().values(), row)}
    return interface.describe_point(FF_IN, si, wheel, digits=3)


def _peak(values: tuple[np.ndarray, np.ndarray], pts: np.ndarray) -> tuple[float, str]:
    k_r, k_l = int(np.argmax(values[0])), int(np.argmax(values[1]))
    if values[0][k_r] >= values[1][k_l]:
        return float(values[0][k_r]), _describe_corner(pts[k_r], "right")
    return float(values[1][k_l]), _describe_corner(pts[k_l], "left")


def corner_peaks(v: Vehicle) -> tuple[Peak, Peak, Peak, list[str]]:
    """Peak current, voltage and traction use over the envelope corners, and the limits they break."""
    op, pts = _corners(v)
    mr, ml = margins(v, op)
    cur, cur_at = _peak((mr.current, ml.current), pts)
    volt, volt_at = _peak((mr.voltage, ml.voltage), pts)
    trac, trac_at = _peak((mr.traction, ml.traction), pts)
    problems = []
    if cur > 1:
        problems.append(
            f"current {cur * v.drive.current_limit_a:.2f} A exceeds drive.current_limit "
            f"{v.drive.current_limit_a:g} A ({cur_at})"
        )
    if volt > 1:
        problems.append(
            f"voltage {volt * v.drive.supply_voltage_v:.2f} V exceeds drive.supply_voltage "
            f"{v.drive.supply_voltage_v:g} V ({volt_at})"
        )
    if trac > 1:
        problems.append(f"traction demand {trac:.2f} x the grip limit: the wheel slips ({trac_at})")
    return (
        Peak(cur * v.drive.current_limit_a, cur_at),
        Peak(volt * v.drive.supply_voltage_v, volt_at),
        Peak(trac, trac_at),
        problems,
    )


def problems(v: Vehicle) -> list[str]:
    """Every limit the envelope breaks: the drive's at the corners, then the lift's (if any)."""
    lift = lift_axis.analyse(v)
    return corner_peaks(v)[3] + (lift.problems if lift is not None else [])


def analyse(v: Vehicle) -> EnvelopeReport:
    """Rows per payload plus peak current/voltage/traction over the envelope corners, and the lift's lines."""
    rows = [payload_row(v, float(p)) for p in np.linspace(0, v.payload.mass_max_kg, PAYLOAD_STEPS)]
    current, voltage, traction, broken = corner_peaks(v)
    lift = lift_axis.analyse(v)
    return EnvelopeReport(
        rows=rows,
        peak_current=current,
        peak_voltage=voltage,
        peak_traction=traction,
        problems=broken + (lift.problems if lift is not None else []),
        lift=lift,
    )
