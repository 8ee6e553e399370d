"""Quantity parsing with pint: one registry, unit kinds named by what they measure."""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

import pint


@dataclass(frozen=True)
class Kind:
    """A unit kind: the SI unit values are stored in and an example for messages."""

    name: str
    si: str
    example: str


MASS = Kind("a mass", "kg", "'12 kg'")
LENGTH = Kind("a length", "m", "'150 mm'")
INERTIA = Kind("a moment of inertia", "kg*m**2", "'0.004 kg*m^2'")
ANGLE = Kind("an angle", "rad", "'6 deg'")
FORCE = Kind("a force", "N", "'3.5 N'")
SPEED = Kind("a speed", "m/s", "'1.2 m/s'")
ACCEL = Kind("an acceleration", "m/s**2", "'0.8 m/s^2'")
DAMPING = Kind("a viscous coefficient", "N*s/m", "'2 N*s/m'")
TORQUE_CONSTANT = Kind("a torque constant", "N*m/A", "'0.058 N*m/A'")
RESISTANCE = Kind("a resistance", "ohm", "'0.6 ohm'")
CURRENT = Kind("a current", "A", "'12 A'")
VOLTAGE = Kind("a voltage", "V", "'24 V'")
YAW_RATE = Kind("an angular speed", "rad/s", "'90 deg/s'")
YAW_ACCEL = Kind("an angular acceleration", "rad/s**2", "'180 deg/s^2'")

_ANGLE_UNITS = {"radian", "degree", "arcminute", "arcsecond", "turn", "gradian", "milliradian"}
_TURNING_UNITS = {"revolutions_per_minute", "revolutions_per_second"}  # angle over time in one unit ('30 rpm')


@lru_cache(maxsize=1)
def registry() -> pint.UnitRegistry:
    """The one pint registry of the process, built lazily; pint's definition cache (in the user's cache
    folder) cuts its start-up from ~0.4 s to ~0.05 s, and we fall back to no cache if that folder fails."""
    try:
        return pint.UnitRegistry(cache_folder=":auto:")
    except Exception:  # an unwritable or broken cache must never stop the tool
        return pint.UnitRegistry()


def _check_turning(text: str, q: Any) -> None:
    """An angular speed or acceleration names its angle ('90 deg/s', '1.5 rad/s'): pint counts radians as
    dimensionless, so '2 Hz' or '2 1/s' would otherwise pass as 2 rad/s, off by 2 pi for hertz."""
    above = {name for name, power in q.unit_items() if power > 0}
    if above and above <= _TURNING_UNITS:
        return  # the dimension check that follows tells a speed from an acceleration
    if not above or not above <= _ANGLE_UNITS:
        raise ValueError(f"{text!r} names no angle over time")


def parse(text: str, kind: Kind) -> float:
    """Parse `text` as a quantity of `kind` and return its SI magnitude; ValueError says why."""
    ureg = registry()
    try:
        q: Any = ureg.Quantity(text)
    except Exception as exc:  # pint raises many types for bad text
        raise ValueError(f"cannot read {text!r} as a quantity ({type(exc).__name__})") from None
    if not isinstance(q, pint.Quantity):
        q = ureg.Quantity(q)
    if kind is ANGLE:
        names = {name for name, _ in q.unit_items()}
        if not names or not names <= _ANGLE_UNITS:
            raise ValueError(f"{text!r} has no angle unit")
    elif kind in (YAW_RATE, YAW_ACCEL):
        _check_turning(text, q)
    elif q.dimensionless:
        raise ValueError(f"{text!r} has no unit")
    try:
        value = float(q.to(kind.si).magnitude)
    except pint.DimensionalityError:
        raise ValueError(f"{text!r} is not {kind.name}") from None
    if not math.isfinite(value):
        raise ValueError(f"{text!r} is not a finite number")
    return value
