"""The forward helper at the look-ahead point (firmware.point_ahead): the rates of the point's velocity
in body axes (forward v', lateral d w') from measured currents, as J times the wheels' accelerations of
`<name>_forward`, in accel steps; its integer form, its proven error bound and its emulation."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import dynamics
from . import fixedpoint as fx
from .errors import CheckFailed
from .synthesis import Firmware

SHIFT_MAX = 30
SHIFT_MIN = 12  # below this many fraction bits for d/(2b), the product is done in 64 bits instead


@dataclass(frozen=True, kw_only=True)
class PointForm:
    """out[0] = round((a_R + a_L)/2); out[1] = round((a_R - a_L) k / 2^shift), k ~ d/(2b) 2^shift."""

    ahead_m: float
    k: int
    shift: int
    wide: bool  # the product needs 64 bits
    bound_mps2: float  # proven worst |firmware - float model| of either output


def point_form(fw: Firmware) -> PointForm | None:
    """The integer form for the model's look-ahead point; None when firmware.point_ahead is not set."""
    ahead = fw.vehicle.firmware.point_ahead_m
    if ahead is None:
        return None
    gain = float(dynamics.point_jacobian(fw.vehicle, ahead)[1, 0])
    outs = fw.fwd_proof.outputs
    total, diff = outs[("accel", 0)] + outs[("accel", 1)], outs[("accel", 0)] + (-outs[("accel", 1)])
    shift, wide = _shift(diff, gain)
    k = int(np.floor(gain * 2.0**shift + 0.5))
    _prove(total, diff, k, shift)
    eps = fw.fwd_bound_mps2 / fw.vehicle.firmware.accel_lsb_mps2  # each wheel's proven error, steps
    forward = eps + 0.5
    lateral = abs(gain) * 2 * eps + abs(k * 2.0**-shift - gain) * diff.magnitude() + 0.5
    bound = max(forward, lateral) * fw.vehicle.firmware.accel_lsb_mps2
    return PointForm(ahead_m=ahead, k=k, shift=shift, wide=wide, bound_mps2=bound)


def _prove(total: fx.Interval, diff: fx.Interval, k: int, shift: int) -> None:
    """The sum and difference of the wheels' proven outputs fit int32, diff * k + half fits int64, and the
    lateral result fits int32; CheckFailed naming the key otherwise."""
    prod = diff * fx.Interval(k, k)
    lateral = fx.Interval(prod.lo, prod.hi + (1 << (shift - 1))).shift_round(shift)
    for what, rng, bits in (
        ("the wheels' sum", total, 32),
        ("the wheels' difference", diff, 32),
        ("the product", fx.Interval(prod.lo, prod.hi + (1 << (shift - 1))), 64),
        ("the lateral output", lateral, 32),
    ):
        if not rng.fits(bits):
            raise CheckFailed(
                f"firmware.point_ahead: in <name>_forward_point {what} can reach [{rng.lo}, {rng.hi}], "
                f"beyond int{bits}: a coarser firmware.accel_lsb or a point nearer P"
            )


def _shift(diff: fx.Interval, gain: float) -> tuple[int, bool]:
    """The most fraction bits (up to SHIFT_MAX) that keep diff * k + half in 32 bits, as long as rounding
    k costs at most a quarter step over the whole range of diff; else SHIFT_MAX bits, 64-bit product."""
    for shift in range(SHIFT_MAX, SHIFT_MIN - 1, -1):
        if 2.0 ** -(shift + 1) * diff.magnitude() > 0.25:
            break
        if _fits_with_half(diff, int(np.floor(gain * 2.0**shift + 0.5)), shift):
            return shift, False
    return SHIFT_MAX, True


def _fits_with_half(diff: fx.Interval, k: int, shift: int) -> bool:
    prod = diff * fx.Interval(k, k)
    return prod.lo >= fx.word_min(32) and prod.hi + (1 << (shift - 1)) <= fx.word_max(32)


def emulate(form: PointForm, accel: np.ndarray) -> np.ndarray:
    """The C's integers from the wheels' accelerations (n, 2) in steps: (n, 2) forward, lateral."""
    a = np.asarray(accel, dtype=np.int64)
    total, diff = a[..., 0] + a[..., 1], a[..., 0] - a[..., 1]
    forward = fx.shift_round(total, 1)
    lateral = fx.shift_round(diff * form.k, form.shift)
    return np.stack([forward, lateral], -1)


def c_view(form: PointForm | None) -> dict[str, object] | None:
    """What ff.c.j2 and ff.h.j2 print for the point form."""
    if form is None:
        return None
    return {
        "ahead": f"{form.ahead_m:g}",
        "k": form.k,
        "shift": form.shift,
        "half": 1 << (form.shift - 1),
        "wide": form.wide,
        "bound": f"{form.bound_mps2:.6g} m/s^2",
    }
