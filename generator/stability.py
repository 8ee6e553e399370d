"""Static stability: every wheel and caster (a skid-steer: its first and last wheel pair) keeps a
positive load over payload x pitch x roll."""

from __future__ import annotations

import math
from typing import NoReturn

import numpy as np

from . import dynamics
from .errors import ModelError
from .vehicle import Vehicle


def _grid(v: Vehicle) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Payload, pitch and roll corners and a dense pitch sweep (loads are linear in payload)."""
    payload = np.linspace(0.0, v.payload.mass_max_kg, 5)
    pitch = np.linspace(-v.envelope.pitch_max_rad, v.envelope.pitch_max_rad, 41)
    roll = np.array([-v.envelope.roll_max_rad, 0.0, v.envelope.roll_max_rad])
    p, th, ph = np.meshgrid(payload, pitch, roll, indexing="ij")
    return p.ravel(), th.ravel(), ph.ravel()


def _level_check(v: Vehicle) -> None:
    """Standing level, empty or loaded: the combined centre of gravity must lie between the drive axle
    (0 m) and the casters, else the vehicle tips whatever the slope; the error names the CoG key."""
    payload = np.linspace(0.0, v.payload.mass_max_kg, 5)
    zero = np.zeros_like(payload)
    drive, caster = dynamics.support_loads(v, payload, zero, zero)
    bad = np.flatnonzero((drive <= 0) | (caster <= 0))
    if not bad.size:
        return
    k = bad[0]
    cog = float(dynamics.combined(v, payload[k]).cog_ahead_m)
    key = "body.cog_ahead" if k == 0 else "payload.cog_ahead"
    if v.casters is None:
        _skid_level_error(v, key, cog, float(payload[k]))
    over = "the drive axle" if caster[k] <= 0 else f"the casters (casters.behind_axle {v.casters.behind_axle_m:g} m)"
    raise ModelError(
        v.source,
        key,
        f"a centre of gravity between the drive axle (0 m) and the casters ({-v.casters.behind_axle_m:g} m)",
        f"the vehicle's at {cog:+.3g} m with payload {payload[k]:g} kg, beyond {over}: it tips standing level",
    )


def _skid_level_error(v: Vehicle, key: str, cog: float, payload: float) -> NoReturn:
    """A skid-steer whose load, spread linearly along a side, leaves its first or last wheels."""
    x = dynamics.skid_positions(v)
    inside = float(np.sum(x * x) / (len(x) * x[-1]))  # where the end wheel's linear share reaches zero
    raise ModelError(
        v.source,
        key,
        f"a centre of gravity within {inside:.3g} m of P, ahead or behind (skid.wheelbase, skid.wheels_per_side)",
        f"the vehicle's at {cog:+.3g} m with payload {payload:g} kg: its end wheels would carry no load",
    )


def check(v: Vehicle) -> None:
    """Raise ModelError naming the first payload/pitch/roll where a load is <= 0 (the vehicle tips):
    the centre-of-gravity key when it tips standing level, else envelope.pitch_max."""
    _level_check(v)
    p, th, ph = _grid(v)
    drive, caster = dynamics.support_loads(v, p, th, ph)
    side = dynamics.lateral_margin(v, p, ph)
    names = ("drive-wheel load", "caster load") if v.skid is None else ("front wheel load", "rear wheel load")
    for values, what in zip((drive, caster), names):
        bad = np.flatnonzero(values <= 0)
        if bad.size:
            k = bad[np.argmin(values[bad])]
            raise ModelError(
                v.source,
                "envelope.pitch_max",
                "positive wheel and caster loads over the envelope"
                if v.skid is None
                else "positive loads on the first and last wheels over the envelope",
                f"{what} {values[k]:.1f} N at payload {p[k]:g} kg, pitch {math.degrees(th[k]):+.2f} deg, "
                f"roll {math.degrees(ph[k]):+.2f} deg (the vehicle tips)",
            )
    bad = np.flatnonzero(side <= 0)
    if bad.size:
        k = bad[np.argmin(side[bad])]
        raise ModelError(
            v.source,
            "envelope.roll_max",
            "a roll the vehicle can stand on sideways",
            f"centre of gravity outside the track at payload {p[k]:g} kg, roll {math.degrees(ph[k]):+.2f} deg",
        )
