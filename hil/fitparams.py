"""The quantities the bench fit estimates, in the coordinates it solves in, with their physical bounds.

The fit's coordinates are chosen so every physical rule is a box bound: the breakaway force enters as
its excess over Coulomb (>= 0), the back-driving efficiency as its reciprocal (>= 1), and the rotating
parts as one reflected mass (the wheel inertia kept, so the rotor inertia it implies is >= 0).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np
from kinetab.generator import dynamics
from kinetab.generator.vehicle import Vehicle

NAMES = (
    "body.mass",
    "body.yaw_inertia",
    "reflected_inertia",
    "friction.coulomb",
    "friction.breakaway_excess",
    "friction.viscous",
    "wheels.rolling_resistance",
    "casters.rolling_resistance",
    "drive.efficiency",
    "drive.backdrive_factor",
    "friction.stribeck_speed",
)
"""Fit coordinates, in this order. The first eight enter the rim force linearly (but for mass times
the rolling-resistance coefficients); the efficiencies scale the measured side; the Stribeck speed is
the one nonlinear parameter."""

SKID_NAMES = (*NAMES[:7], "skid.lateral_friction", *NAMES[8:])
"""A skid-steer's coordinates: its lateral friction, which like the casters' rolling resistance enters
the rim force times the mass, takes the casters' place."""

LINEAR = NAMES[:8]
MEASURED_SIDE = ("drive.efficiency", "drive.backdrive_factor")
INDEX = {name: k for k, name in enumerate(NAMES)} | {"skid.lateral_friction": 7}
GROUND = 7  # the coordinate of the casters' rolling resistance or the skid-steer's lateral friction


def names(v: Vehicle) -> tuple[str, ...]:
    """The fit coordinates of this vehicle's layout, in order."""
    return NAMES if v.skid is None else SKID_NAMES


@dataclass(frozen=True)
class Shown:
    """How a fit coordinate is shown to the user: unit text and the factor from SI to it."""

    unit: str
    factor: float = 1.0


SHOWN = {
    "body.mass": Shown("kg"),
    "body.yaw_inertia": Shown("kg*m^2"),
    "reflected_inertia": Shown("kg"),
    "friction.coulomb": Shown("N"),
    "friction.breakaway_excess": Shown("N"),
    "friction.breakaway": Shown("N"),
    "friction.viscous": Shown("N*s/m"),
    "wheels.rolling_resistance": Shown("1"),
    "casters.rolling_resistance": Shown("1"),
    "skid.lateral_friction": Shown("1"),
    "drive.efficiency": Shown("1"),
    "drive.backdrive_factor": Shown("1"),
    "drive.backdrive_efficiency": Shown("1"),
    "friction.stribeck_speed": Shown("mm/s", 1000.0),
}


def _set(v: Vehicle, section: str, **fields: float) -> Vehicle:
    return dataclasses.replace(v, **{section: dataclasses.replace(getattr(v, section), **fields)})


def wheel_reflected_mass(v: Vehicle) -> float:
    """The wheels' own share of a side's reflected mass, kg: n J_wheel / r^2 (kept by the fit)."""
    return dynamics.wheels_per_side(v) * v.wheels.inertia_kgm2 / dynamics.wheel_radius(v) ** 2


def _ground(v: Vehicle) -> float:
    """The coordinate GROUND's value: the casters' rolling resistance, or the lateral friction."""
    if v.skid is not None:
        return v.skid.lateral_friction
    assert v.casters is not None
    return v.casters.rolling_resistance


def values(v: Vehicle) -> np.ndarray:
    """The vehicle in fit coordinates (SI)."""
    b, f, d = v.body, v.friction, v.drive
    return np.array(
        [
            b.mass_kg,
            b.mass_kg * b.gyration_radius_m**2,
            dynamics.reflected_mass(v),
            f.coulomb_n,
            f.breakaway_n - f.coulomb_n,
            f.viscous_ns_per_m,
            v.wheels.rolling_resistance,
            _ground(v),
            d.efficiency,
            1.0 / d.backdrive_efficiency,
            f.stribeck_speed_mps,
        ]
    )


def vehicle_with(v: Vehicle, theta: np.ndarray) -> Vehicle:
    """The vehicle with every fit coordinate set (the yaw inertia kept as given when the mass moves)."""
    mass, yaw, m_rot, coulomb, excess, viscous, c_w, c_c, eff, back, v_s = (float(x) for x in theta)
    r, i = dynamics.wheel_radius(v), v.drive.gear_ratio
    v = _set(v, "body", mass_kg=mass, gyration_radius_m=math.sqrt(max(yaw, 0.0) / mass) if mass > 0 else 0.0)
    rotor = (m_rot - wheel_reflected_mass(v)) * r**2 / (i**2 * dynamics.motors_per_side(v))
    v = _set(v, "drive", rotor_inertia_kgm2=rotor, efficiency=eff, backdrive_efficiency=1.0 / back)
    v = _set(
        v,
        "friction",
        coulomb_n=coulomb,
        breakaway_n=coulomb + excess,
        viscous_ns_per_m=viscous,
        stribeck_speed_mps=v_s,
    )
    v = _set(v, "wheels", rolling_resistance=c_w)
    if v.skid is not None:
        return _set(v, "skid", lateral_friction=c_c)
    return _set(v, "casters", rolling_resistance=c_c)


def bounds(v: Vehicle) -> tuple[np.ndarray, np.ndarray]:
    """(lower, upper) in fit coordinates: the ranges the model file accepts (model.SCHEMA), made boxes.
    The yaw inertia's upper bound uses the model's mass (gyration radius <= 3 x track)."""
    r, i = dynamics.wheel_radius(v), v.drive.gear_ratio
    m_wheel = wheel_reflected_mass(v)
    yaw_max = v.body.mass_kg * (3 * v.wheels.track_m) ** 2
    rotors = dynamics.motors_per_side(v) * i**2 / r**2  # the reflected mass of 1 kg*m^2 of rotor inertia
    ground = 0.5 if v.skid is None else 2.0
    lower = np.array([1e-3, 0.0, m_wheel, 0.0, 0.0, 0.0, 0.0, 0.0, 0.05, 1.0, 1e-4])
    upper = np.array([5000.0, yaw_max, m_wheel + rotors, 1e4, 1e4, 1e5, 0.5, ground, 1.0, 20.0, 10.0])
    return lower, upper


BOUND_TEXT = {
    "body.mass": "the model's range (0, 5000] kg",
    "body.yaw_inertia": "0 or a gyration radius of 3 x wheels.track",
    "reflected_inertia": "the wheels' own share (a rotor inertia of 0)",
    "friction.coulomb": "0 N",
    "friction.breakaway_excess": "breakaway = coulomb",
    "friction.viscous": "0 N*s/m",
    "wheels.rolling_resistance": "0 or 0.5",
    "casters.rolling_resistance": "0 or 0.5",
    "skid.lateral_friction": "0 or 2",
    "drive.efficiency": "0.05 or 1",
    "drive.backdrive_factor": "a back-driving efficiency of 1 or 0.05",
    "friction.stribeck_speed": "0.1 mm/s or 10 m/s",
}


def scales(v: Vehicle, theta: np.ndarray) -> np.ndarray:
    """A typical size of each coordinate for this vehicle: its model value, or a size the physics
    suggests when the model says zero (friction from the current limit, coefficients 0.01)."""
    force = v.drive.current_limit_a / dynamics.motor_gain(v)  # rim force at the current limit, N
    typical = np.array(
        [
            1.0,
            0.01,
            1e-3,
            1e-3 * force,
            1e-3 * force,
            1e-3 * force / max(v.envelope.speed_max_mps, 1e-3),
            0.01,
            0.01,
            0.5,
            1.0,
            0.01,
        ]
    )
    return np.maximum(np.abs(theta), typical)
