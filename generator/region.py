"""The motion region: the wheel box (speed_max, accel_max per wheel) cut by the optional body-frame limits
(forward speed and acceleration of P, yaw rate and yaw acceleration), for speeds and for accelerations.

With u = (u_R + u_L)/2 the forward speed of P and w = (u_R - u_L)/(2b) the yaw rate (docs/physics.md),
|u| <= V and |w| <= W read |u_R + u_L| <= 2V and |u_R - u_L| <= 2bW: the region is the box cut by two
pairs of diagonal lines, a convex polygon. `clamp` is the one rule that moves a pair of wheel values into
it (the firmware's PairClamp op computes the same integers; emulate uses this function).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from . import fixedpoint as fx
from .vehicle import Vehicle


@dataclass(frozen=True, kw_only=True)
class PairRegion:
    """|x_R|, |x_L| <= edge, |x_R + x_L| <= sum_max, |x_R - x_L| <= diff_max, in one unit (SI or steps).

    Normalised (`normalised`): edge <= (sum_max + diff_max)/2 and both diagonals <= 2 edge, so no limit is
    looser than what the others already imply, and the region touches every one of its edges."""

    edge: float
    sum_max: float
    diff_max: float

    @property
    def is_box(self) -> bool:
        """True when the diagonal limits cut nothing: the plain box of before."""
        return self.sum_max >= 2 * self.edge and self.diff_max >= 2 * self.edge

    def normalised(self) -> PairRegion:
        both = self.sum_max + self.diff_max
        edge = min(self.edge, both // 2 if isinstance(both, int) else both / 2)  # steps: both diagonals are even
        return PairRegion(edge=edge, sum_max=min(self.sum_max, 2 * edge), diff_max=min(self.diff_max, 2 * edge))


def _limits(v: Vehicle, quantity: str) -> tuple[float, float | None, float | None, float]:
    """(each wheel's edge, the forward limit, the turn limit at each wheel (b times the yaw limit), the
    firmware step) for "speed" (m/s) or "accel" (m/s^2); None where a body-frame key is not set."""
    env, b, fw = v.envelope, v.wheels.track_m / 2, v.firmware
    if quantity == "speed":
        edge, forward, yaw, lsb = env.speed_max_mps, env.forward_speed_max_mps, env.yaw_rate_max_radps, fw.speed_lsb_mps
    else:
        edge, forward, yaw, lsb = (
            env.accel_max_mps2,
            env.forward_accel_max_mps2,
            env.yaw_accel_max_radps2,
            fw.accel_lsb_mps2,
        )
    return edge, forward, None if yaw is None else b * yaw, lsb


def _si(v: Vehicle, quantity: str) -> PairRegion:
    edge, forward, turn, _ = _limits(v, quantity)
    sum_max = 2 * edge if forward is None else 2 * forward
    diff_max = 2 * edge if turn is None else 2 * turn
    return PairRegion(edge=edge, sum_max=sum_max, diff_max=diff_max).normalised()


def speed_region(v: Vehicle) -> PairRegion:
    """Rim speeds, m/s: speed_max per wheel, forward_speed_max, yaw_rate_max times the half track."""
    return _si(v, "speed")


def accel_region(v: Vehicle) -> PairRegion:
    """Rim accelerations, m/s^2: accel_max per wheel, forward_accel_max, yaw_accel_max times the half track."""
    return _si(v, "accel")


def _in_steps(v: Vehicle, quantity: str) -> PairRegion:
    """The region in firmware steps, containing the stated limits: each limit rounds up to whole steps
    (a wheel pair at exactly the forward or turning limit is inside); the diagonals are even, so the
    clamp's midpoint (s + d)/2 is a whole step."""
    edge_si, forward_si, turn_si, lsb = _limits(v, quantity)
    edge = fx.steps_covering(edge_si, lsb)
    sum_max = 2 * edge if forward_si is None else 2 * fx.steps_covering(forward_si, lsb)
    diff_max = 2 * edge if turn_si is None else 2 * fx.steps_covering(turn_si, lsb)
    region = PairRegion(edge=edge, sum_max=sum_max, diff_max=diff_max).normalised()
    assert int(region.sum_max) % 2 == 0 and int(region.diff_max) % 2 == 0
    return region


def speed_steps(v: Vehicle) -> PairRegion:
    return _in_steps(v, "speed")


def accel_steps(v: Vehicle) -> PairRegion:
    return _in_steps(v, "accel")


def clamp(right: ArrayLike, left: ArrayLike, reg: PairRegion, *, integer: bool) -> tuple[NDArray, NDArray]:
    """The pair moved into the region. Each wheel is first clamped to the box; then, when the sum s (the
    forward part) or the difference d (the turn) is beyond its limit, both are scaled toward zero by the
    tighter of sum_max/|s| and diff_max/|d|: the wheels slow in proportion, so the path's curvature and
    each wheel's direction are kept (a path follower needs its curvature more than its pace). Scaling
    only shrinks |s| and |d|, and inside the box |s| + |d| = 2 max(|r|, |l|) <= 2 edge, so the result stays
    in the box. In steps (integer) the scaled value is truncated toward zero, and an odd s + d moves s one
    step toward zero, so each wheel is a whole step. A pair inside is returned unchanged."""
    dtype = np.int64 if integer else float
    r = np.clip(np.asarray(right, dtype), -reg.edge, reg.edge)
    lf = np.clip(np.asarray(left, dtype), -reg.edge, reg.edge)
    s, d = r + lf, r - lf
    sum_max, diff_max = (int(reg.sum_max), int(reg.diff_max)) if integer else (reg.sum_max, reg.diff_max)
    over_sum = np.abs(s) * diff_max >= np.abs(d) * sum_max  # the sum's limit is the tighter (or as tight)
    by_sum, by_diff = over_sum & (np.abs(s) > sum_max), ~over_sum & (np.abs(d) > diff_max)
    if integer:
        s2 = np.where(by_sum, np.sign(s) * sum_max, np.where(by_diff, _scaled(s, diff_max, d), s))
        d2 = np.where(by_diff, np.sign(d) * diff_max, np.where(by_sum, _scaled(d, sum_max, s), d))
        s2 = s2 - np.sign(s2) * ((s2 + d2) & 1)
        return ((s2 + d2) >> 1).astype(np.int64), ((s2 - d2) >> 1).astype(np.int64)
    with np.errstate(divide="ignore", invalid="ignore"):
        factor = np.where(by_sum, sum_max / np.abs(s), np.where(by_diff, diff_max / np.abs(d), 1.0))
    return (s + d) * factor / 2, (s - d) * factor / 2


def _scaled(x: NDArray, limit: float, by: NDArray) -> NDArray:
    """x * limit / |by| truncated toward zero (int64: |x| limit < 2^62 here); 0 where by is 0."""
    den = np.maximum(np.abs(by), 1)
    return np.sign(x) * (np.abs(x) * limit // den)


def inside(right: ArrayLike, left: ArrayLike, reg: PairRegion, *, slack: float = 0.0) -> NDArray[np.bool_]:
    """Whether each pair lies in the region (each limit widened by the fraction `slack`)."""
    r, lf = np.asarray(right, float), np.asarray(left, float)
    grow = 1 + slack
    return (
        (np.abs(r) <= reg.edge * grow)
        & (np.abs(lf) <= reg.edge * grow)
        & (np.abs(r + lf) <= reg.sum_max * grow)
        & (np.abs(r - lf) <= reg.diff_max * grow)
    )


def vertices(reg: PairRegion) -> NDArray[np.float64]:
    """The polygon's corners (k, 2) as (right, left), in the order found: every crossing of two of its
    eight edge lines that lies inside (the maxima of a linear function over it sit there)."""
    lines = [(1.0, 0.0, reg.edge), (0.0, 1.0, reg.edge), (1.0, 1.0, reg.sum_max), (1.0, -1.0, reg.diff_max)]
    signed = [(a, b, s * lim) for a, b, lim in lines for s in (1, -1)]
    found: list[tuple[float, float]] = []
    for (a1, b1, c1), (a2, b2, c2) in itertools.combinations(signed, 2):
        det = a1 * b2 - a2 * b1
        if det == 0:
            continue
        x, y = (c1 * b2 - c2 * b1) / det, (a1 * c2 - a2 * c1) / det
        if inside(x, y, reg, slack=1e-12) and all(abs(x - p) + abs(y - q) > 1e-12 * (1 + reg.edge) for p, q in found):
            found.append((x, y))
    return np.array(found)
