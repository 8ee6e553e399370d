"""The optional vertical lift axis: the force its screw or belt must give the carriage, the motor's
torque, current and voltage, and the lift's envelope lines (holding and peak current, peak voltage).

Carriage height z up; speed v and acceleration a of the carriage (up > 0); payload p on the carriage.
A counterweight m_w hangs on a rope over a pulley and moves the other way; a gas spring or the like
pushes up with a constant force. The derivation is in docs/physics.md (Lift axis).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .dynamics import G_N, opposed
from .vehicle import Lift, Vehicle

Array = NDArray[np.float64]


def motor_rad_per_m(lift: Lift) -> float:
    """Motor angle per metre of carriage travel, rad/m: 2 pi i / lead."""
    return 2 * math.pi * lift.gear_ratio / lift.lead_m


def reflected_mass(lift: Lift) -> float:
    """The rotor's inertia as a mass at the carriage, kg: J_r (2 pi i / lead)^2 (shown by predict)."""
    return lift.rotor_inertia_kgm2 * motor_rad_per_m(lift) ** 2


def friction(lift: Lift, speed: ArrayLike) -> Array:
    """Guide and screw friction at the carriage, N: F_c sign(v) min(1, |v|/deadband) + b v."""
    v = np.asarray(speed, float)
    ramp = np.sign(v) * np.minimum(1.0, np.abs(v) / lift.deadband_mps)
    return lift.coulomb_n * ramp + lift.viscous_ns_per_m * v


def load_force(lift: Lift, payload_kg: ArrayLike, speed: ArrayLike, accel: ArrayLike) -> Array:
    """Force the screw or belt must give the carriage (up > 0), N:
    (m_c + p + m_w) a + (m_c + p - m_w) g - F_assist + F_friction(v)."""
    p, a = np.asarray(payload_kg, float), np.asarray(accel, float)
    up, down = lift.carriage_mass_kg + p, lift.counterweight_kg
    return (up + down) * a + (up - down) * G_N - lift.assist_force_n + friction(lift, speed)


def blend_width(lift: Lift) -> float:
    """Carriage speed over which the efficiency moves from motoring to back-driving, m/s: twice the
    deadband, so the current has no step at zero speed (the drive's rule, dynamics.blend_width)."""
    return 2 * lift.deadband_mps


def backdrive_factor(lift: Lift, speed: ArrayLike) -> Array:
    """f(v) = 1 + (k - 1) min(1, |v|/w), k = eta eta_back: the back-driven screw torque over the motoring
    one for the same force; 1 at standstill (holding counts as motoring), k beyond the blend width w."""
    k = lift.efficiency * lift.backdrive_efficiency
    return 1 + (k - 1) * np.minimum(1.0, np.abs(np.asarray(speed, float)) / blend_width(lift))


def motor_torque(lift: Lift, payload_kg: ArrayLike, speed: ArrayLike, accel: ArrayLike) -> Array:
    """Motor torque, N*m: the rotor's own J_r alpha_m, plus the screw torque F lead / (2 pi i eta) when the
    motor drives the load (F v >= 0), times backdrive_factor when the load drives the motor."""
    force = load_force(lift, payload_kg, speed, accel)
    scale = np.where(opposed(force, speed), backdrive_factor(lift, speed), 1.0)
    screw = force / (motor_rad_per_m(lift) * lift.efficiency) * scale
    return lift.rotor_inertia_kgm2 * motor_rad_per_m(lift) * np.asarray(accel, float) + screw


def motor_current(lift: Lift, payload_kg: ArrayLike, speed: ArrayLike, accel: ArrayLike) -> Array:
    """Motor current, A: I = tau_m / k_t."""
    return motor_torque(lift, payload_kg, speed, accel) / lift.torque_constant_nm_per_a


def motor_voltage(lift: Lift, current: ArrayLike, speed: ArrayLike) -> Array:
    """Terminal voltage, V: U = R_w I + k_t omega_m with omega_m = 2 pi i v / lead (k_e = k_t in SI)."""
    omega_m = motor_rad_per_m(lift) * np.asarray(speed, float)
    return lift.winding_resistance_ohm * np.asarray(current, float) + lift.torque_constant_nm_per_a * omega_m


def supply_voltage(v: Vehicle, lift: Lift) -> float:
    """The lift drive's supply, V: its own key, else the vehicle's drive bus."""
    return v.drive.supply_voltage_v if lift.supply_voltage_v is None else lift.supply_voltage_v


@dataclass(frozen=True, kw_only=True)
class LiftPeak:
    """The largest |value| over the lift's corner points and where it occurs."""

    value: float
    payload_kg: float
    speed_mps: float
    accel_mps2: float

    def where(self) -> str:
        return f"payload {self.payload_kg:g} kg, speed {self.speed_mps:+g} m/s, accel {self.accel_mps2:+g} m/s^2"


@dataclass(frozen=True, kw_only=True)
class LiftReport:
    """The lift's envelope lines: holding current empty and full, peak current and voltage, a full stroke."""

    hold_empty_a: float
    hold_full_a: float
    peak_current: LiftPeak
    peak_voltage: LiftPeak
    stroke_s: float  # one full stroke from rest to rest at speed_max and accel_max
    stroke_top_speed_mps: float  # the speed the stroke reaches (below speed_max on a short stroke)
    problems: list[str]


def corners(lift: Lift) -> tuple[Array, Array, Array]:
    """Payload, speed and acceleration at every combination of the points where the current's pieces
    meet: payload 0 and max; speed 0, +-deadband, +-blend width, +-speed_max; acceleration 0, +-accel_max."""
    edges = (lift.deadband_mps, blend_width(lift), lift.speed_max_mps)
    speeds = sorted({0.0, *(s * e for e in edges if e <= lift.speed_max_mps for s in (-1, 1))})
    accels = (-lift.accel_max_mps2, 0.0, lift.accel_max_mps2)
    grid = np.array(list(itertools.product((0.0, lift.payload_max_kg), speeds, accels)))
    return grid[:, 0], grid[:, 1], grid[:, 2]


def _peak(values: Array, p: Array, s: Array, a: Array) -> LiftPeak:
    k = int(np.argmax(np.abs(values)))
    return LiftPeak(value=float(abs(values[k])), payload_kg=float(p[k]), speed_mps=float(s[k]), accel_mps2=float(a[k]))


def stroke(lift: Lift) -> tuple[float, float]:
    """(time, top speed) of one full stroke from rest to rest, s and m/s: a trapezoid at speed_max and
    accel_max, or a triangle when the stroke is too short to reach speed_max."""
    v, a, x = lift.speed_max_mps, lift.accel_max_mps2, lift.travel_m
    if x >= v * v / a:
        return x / v + v / a, v
    top = math.sqrt(x * a)
    return 2 * top / a, top


def analyse(v: Vehicle) -> LiftReport | None:
    """The lift's envelope lines and the limits it breaks (none: the vehicle has no lift)."""
    lift = v.lift
    if lift is None:
        return None
    p, s, a = corners(lift)
    current = motor_current(lift, p, s, a)
    cur, volt = _peak(current, p, s, a), _peak(motor_voltage(lift, current, s), p, s, a)
    supply = supply_voltage(v, lift)
    problems = []
    if cur.value > lift.current_limit_a:
        problems.append(
            f"lift current {cur.value:.2f} A exceeds lift.current_limit {lift.current_limit_a:g} A ({cur.where()})"
        )
    if volt.value > supply:
        key = "lift.supply_voltage" if lift.supply_voltage_v is not None else "drive.supply_voltage"
        problems.append(f"lift voltage {volt.value:.2f} V exceeds {key} {supply:g} V ({volt.where()})")
    time_s, top = stroke(lift)
    return LiftReport(
        hold_empty_a=float(motor_current(lift, 0.0, 0.0, 0.0)),
        hold_full_a=float(motor_current(lift, lift.payload_max_kg, 0.0, 0.0)),
        peak_current=cur,
        peak_voltage=volt,
        stroke_s=time_s,
        stroke_top_speed_mps=top,
        problems=problems,
    )
