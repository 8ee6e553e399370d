"""Body-frame firmware inputs (firmware.inputs = 'body'): the feed-forward takes the forward speed and
acceleration of P and the yaw rate and acceleration, each in its own step, and first turns each pair into
the wheel steps the tables are indexed by.

u_R = u + b w and u_L = u - b w (dynamics.wheels_from_body). One body step is worth r_u = lsb_u / lsb_wheel
and r_w = b lsb_w / lsb_wheel wheel steps; the firmware multiplies by k_u / 2^s and k_w / 2^s and rounds
(ties up). With dyadic ratios (whole numbers with the default steps) that is lossless; otherwise each wheel
lands within `Conversion.deviation` steps of the exact value, an input resolution the build reports.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from . import dynamics, region
from . import fixedpoint as fx
from .vehicle import Vehicle

DYADIC_SHIFT_MAX = 16  # a ratio that is k / 2^s with s up to this is taken as dyadic (lossless)
WIDE_SHIFT = 30  # constants of an inexact ratio: at most 30 fraction bits
NARROW_DRIFT = 1 / 64  # wheel steps the constants' rounding may add before the 64-bit form is taken


def is_body(v: Vehicle) -> bool:
    return v.firmware.inputs == "body"


def lsb(v: Vehicle, quantity: str) -> float:
    """SI value of one body-frame step: "forward_speed" (m/s), "yaw_rate" (rad/s), "forward_accel" (m/s^2),
    "yaw_accel" (rad/s^2); the model key, or by default one wheel step (yaw: one wheel step at each wheel)."""
    fw, b = v.firmware, dynamics.half_track(v)
    set_value, wheel = {
        "forward_speed": (fw.forward_speed_lsb_mps, fw.speed_lsb_mps),
        "yaw_rate": (fw.yaw_rate_lsb_radps, fw.speed_lsb_mps / b),
        "forward_accel": (fw.forward_accel_lsb_mps2, fw.accel_lsb_mps2),
        "yaw_accel": (fw.yaw_accel_lsb_radps2, fw.accel_lsb_mps2 / b),
    }[quantity]
    return wheel if set_value is None else set_value


def limit_si(v: Vehicle, quantity: str) -> float:
    """The body-frame limit (SI) of one input: what the wheel region allows along its axis (region.py)."""
    pair = region.speed_region(v) if quantity.endswith("speed") or quantity == "yaw_rate" else region.accel_region(v)
    return pair.sum_max / 2 if quantity.startswith("forward") else pair.diff_max / (2 * dynamics.half_track(v))


def limit_steps(v: Vehicle, quantity: str) -> int:
    """The body-frame limit in its steps, containing the SI limit (rounded up, like every envelope edge)."""
    return fx.steps_covering(limit_si(v, quantity), lsb(v, quantity))


@dataclass(frozen=True, kw_only=True)
class Conversion:
    """One pair's conversion to wheel steps: wheel = round((along k_along +- turn k_turn) / 2^shift), + for
    the right wheel; `wide`: the products and their sum need 64 bits."""

    k_along: int
    k_turn: int
    shift: int
    r_along: float  # the exact ratios: wheel steps per body step
    r_turn: float
    along_max: int  # the body clamps' limits, in body steps
    turn_max: int
    wide: bool

    @property
    def lossless(self) -> bool:
        """Whole-number ratios: the wheel steps are the exact values (no constant rounds, nothing shifts)."""
        return self.shift == 0 and self.k_along == self.r_along and self.k_turn == self.r_turn

    def deviation(self) -> float:
        """Proven worst |firmware wheel - exact wheel| in wheel steps over the clamped body inputs: the
        constants' rounding times the inputs' largest values, plus half a step when the sum is shifted."""
        if self.lossless:
            return 0.0
        scale = 2.0**-self.shift
        drift = self.along_max * abs(self.k_along * scale - self.r_along)
        drift += self.turn_max * abs(self.k_turn * scale - self.r_turn)
        return drift + (0.5 if self.shift > 0 else 0.0)

    def wheels(self, along: ArrayLike, turn: ArrayLike) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
        """The firmware's integers (before the box clamp): exact int64 arithmetic, as the C's."""
        a = np.asarray(along, dtype=np.int64) * self.k_along
        t = np.asarray(turn, dtype=np.int64) * self.k_turn
        return np.asarray(fx.shift_round(a + t, self.shift)), np.asarray(fx.shift_round(a - t, self.shift))


def _dyadic(ratio: float) -> int | None:
    """The smallest s with ratio * 2^s a whole number (to 1e-12), if s <= DYADIC_SHIFT_MAX."""
    for s in range(DYADIC_SHIFT_MAX + 1):
        k = ratio * 2**s
        if abs(k - round(k)) <= 1e-12 * max(1.0, k):
            return s
    return None


def mix(v: Vehicle, pair: str) -> Conversion:
    """The conversion constants of "speed" (forward speed, yaw rate) or "accel" (their rates): exact when
    both ratios are dyadic; else in 32 bits when the constants' rounding adds at most NARROW_DRIFT of a
    wheel step to the half step of the final rounding, else with WIDE_SHIFT fraction bits in 64 bits."""
    along_q, turn_q = ("forward_speed", "yaw_rate") if pair == "speed" else ("forward_accel", "yaw_accel")
    wheel = v.firmware.speed_lsb_mps if pair == "speed" else v.firmware.accel_lsb_mps2
    r_along = lsb(v, along_q) / wheel
    r_turn = dynamics.half_track(v) * lsb(v, turn_q) / wheel
    sa, st = _dyadic(r_along), _dyadic(r_turn)
    along_max, turn_max = limit_steps(v, along_q), limit_steps(v, turn_q)
    if sa is not None and st is not None:  # take the exact dyadic values, not the float noise
        shift = max(sa, st)
        r_along, r_turn = round(r_along * 2**shift) / 2**shift, round(r_turn * 2**shift) / 2**shift
        return _built(r_along, r_turn, along_max=along_max, turn_max=turn_max, shift=shift)
    for shift in range(WIDE_SHIFT, 0, -1):  # the most fraction bits that keep the sum in 32 bits
        narrow = _built(r_along, r_turn, along_max=along_max, turn_max=turn_max, shift=shift)
        if not narrow.wide:
            if narrow.deviation() <= 0.5 + NARROW_DRIFT:
                return narrow
            break
    shift = WIDE_SHIFT
    while (
        shift > 0 and _top(r_along, r_turn, along_max=along_max, turn_max=turn_max, shift=shift) >= 2**62
    ):  # clear of int64
        shift -= 1
    return _built(r_along, r_turn, along_max=along_max, turn_max=turn_max, shift=shift)


def _constants(r_along: float, r_turn: float, shift: int) -> tuple[int, int]:
    return int(math.floor(r_along * 2**shift + 0.5)), int(math.floor(r_turn * 2**shift + 0.5))


def _top(r_along: float, r_turn: float, *, along_max: int, turn_max: int, shift: int) -> int:
    """The largest sum before the shift, rounding half included."""
    k_along, k_turn = _constants(r_along, r_turn, shift)
    return along_max * k_along + turn_max * k_turn + ((1 << (shift - 1)) if shift else 0)


def _built(r_along: float, r_turn: float, *, along_max: int, turn_max: int, shift: int) -> Conversion:
    k_along, k_turn = _constants(r_along, r_turn, shift)
    return Conversion(
        k_along=k_along,
        k_turn=k_turn,
        shift=shift,
        r_along=r_along,
        r_turn=r_turn,
        along_max=along_max,
        turn_max=turn_max,
        wide=_top(r_along, r_turn, along_max=along_max, turn_max=turn_max, shift=shift) > fx.word_max(32),
    )


def wheel_fields(v: Vehicle, fields: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Body-frame feed-forward inputs (steps, by member) -> the wheel inputs the firmware's conversion makes
    of them (steps, before its wheel clamp): {"speed": (n, 2), "accel": (n, 2)} plus the other members."""
    names = {"speed": ("forward_speed", "yaw_rate"), "accel": ("forward_accel", "yaw_accel")}
    out = {k: x for k, x in fields.items() if k not in {n for pair in names.values() for n in pair}}
    for pair, (along, turn) in names.items():
        right, left = mix(v, pair).wheels(fields[along], fields[turn])
        out[pair] = np.stack([right, left], axis=-1)
    return out


def inside(v: Vehicle, fields: dict[str, np.ndarray], edges: dict[str, int]) -> NDArray[np.bool_]:
    """Whether the firmware's wheel values of body-frame inputs lie within each wheel's edge (steps)."""
    wheels = wheel_fields(v, fields)
    return np.all(np.abs(wheels["speed"]) <= edges["speed"], axis=-1) & np.all(
        np.abs(wheels["accel"]) <= edges["accel"], axis=-1
    )


def from_wheel_fields(v: Vehicle, fields: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Wheel inputs (steps, by member) -> the nearest body-frame inputs (steps, within int32): the same
    operating points for vectors and samples, up to the body steps' resolution."""
    names = {"speed": ("forward_speed", "yaw_rate"), "accel": ("forward_accel", "yaw_accel")}
    out = {k: x for k, x in fields.items() if k not in names}
    low, high = -(2**31), 2**31 - 1
    for pair, (along, turn) in names.items():
        m, w = mix(v, pair), np.asarray(fields[pair], dtype=float)
        out[along] = np.clip(np.floor((w[..., 0] + w[..., 1]) / 2 / m.r_along + 0.5), low, high).astype(np.int64)
        out[turn] = np.clip(np.floor((w[..., 0] - w[..., 1]) / 2 / m.r_turn + 0.5), low, high).astype(np.int64)
    return out
