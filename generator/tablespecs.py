"""Table specs from the physics: each table's input, symmetry, pieces and units, the function it
holds (from `dynamics`) and the model keys its values come from; and the envelope edges in steps.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from . import bodyframe, dynamics, interface, region
from . import fixedpoint as fx
from . import tables as tb
from .vehicle import Vehicle


@dataclass(frozen=True)
class Limits:
    """Envelope edges in firmware steps (see limits_of); speed and accel are each wheel's edge of the
    region (the box cut by the body-frame limits, region.py), which the pairs refine."""

    speed: int
    accel: int
    pitch: int
    roll: int
    payload: int
    deadband: int
    current: int
    speed_pair: region.PairRegion
    accel_pair: region.PairRegion
    forward_speed: int  # the body-frame inputs' edges in their steps (bodyframe.limit_steps)
    yaw_rate: int
    forward_accel: int
    yaw_accel: int


def limits_of(v: Vehicle) -> Limits:
    """Envelope edges in steps, each containing its stated limit (rounded up), so an input of exactly the
    limit is inside; the deadband edge is the last step inside the deadband (rounded down)."""
    fw, env = v.firmware, v.envelope
    speeds, accels = region.speed_steps(v), region.accel_steps(v)
    lim = Limits(
        speed=int(speeds.edge),
        accel=int(accels.edge),
        pitch=fx.steps_covering(env.pitch_max_rad, fw.angle_lsb_rad),
        roll=fx.steps_covering(env.roll_max_rad, fw.angle_lsb_rad),
        payload=fx.steps_covering(v.payload.mass_max_kg, fw.mass_lsb_kg),
        deadband=fx.steps_within(v.friction.deadband_mps, fw.speed_lsb_mps),
        current=fx.steps_covering(v.drive.current_limit_a, fw.current_lsb_a),
        speed_pair=speeds,
        accel_pair=accels,
        **{q: bodyframe.limit_steps(v, q) for q in ("forward_speed", "yaw_rate", "forward_accel", "yaw_accel")},
    )
    assert lim.deadband < lim.speed, "the loader keeps the deadband below each wheel's largest speed"
    return lim


STRIBECK_SHARE = 1 / 32
"""The share of the current budget by which friction beyond the Stribeck edge may differ from its affine
tail (Coulomb plus viscous): small, so the tail's one segment barely adds to the bound."""


def stribeck_edge(v: Vehicle, lim: Limits, steps_per_newton: float, budget_steps: float) -> int:
    """The last speed step (|u|, from the deadband edge on) where the Stribeck dip (F_s - F_c) exp(-(u/v_s)^2)
    of a side's drivetrains still exceeds STRIBECK_SHARE of the budget; beyond it friction is affine in |u|
    to within that share, so one table segment can hold it. The deadband edge when the dip is that small
    there. The dip falls monotonically, so the edge is solved for, not searched (edges reach 2^30 steps)."""
    lsb, f = v.firmware.speed_lsb_mps, v.friction

    def dip(x: int) -> float:
        level = dynamics.stribeck_level(v, x * lsb) - f.coulomb_n
        return abs(float(dynamics.motors_per_side(v) * level * steps_per_newton))

    tol = STRIBECK_SHARE * budget_steps
    peak = dip(0)
    if peak <= tol:
        return lim.deadband
    reach = f.stribeck_speed_mps * math.sqrt(math.log(peak / tol)) / lsb  # dip(reach) = tol
    edge = min(max(math.ceil(reach) - 1, lim.deadband), lim.speed)
    while edge < lim.speed and dip(edge + 1) > tol:  # float rounding at the boundary: a step or two
        edge += 1
    while edge > lim.deadband and dip(edge) <= tol:
        edge -= 1
    return edge


def _speed_pieces(v: Vehicle, lim: Limits, scale: float, edge: int) -> tuple[tb.Piece, tb.Piece, tb.Piece, tb.Piece]:
    """Friction and deadband-shape pieces of |u| in steps, split at `edge`: the deadband edge, or further
    out at the Stribeck edge (stribeck_edge) so the outer piece holds the affine tail alone. Each piece's
    function continues smoothly past its end (breakpoints may sit there); a piece that crosses the deadband
    edge holds the true shape there, kink and all (measured at every input like any other)."""
    lsb = v.firmware.speed_lsb_mps

    def inside(x: np.ndarray) -> np.ndarray:
        if edge == lim.deadband:
            return dynamics.deadband_inside(v, x * lsb)
        return np.abs(dynamics.deadband_shape(v, x * lsb))

    label = "inside the deadband" if edge == lim.deadband else "through the deadband and the Stribeck dip"
    outer = "outside the deadband" if edge == lim.deadband else "beyond the Stribeck dip (Coulomb plus viscous)"
    fric_in = tb.Piece(
        x0=0, x1=edge, func=lambda x: dynamics.friction_force(v, x * lsb, inside(x)) * scale, label=label
    )
    fric_out = tb.Piece(
        x0=edge + 1, x1=lim.speed, func=lambda x: dynamics.friction_force(v, x * lsb, 1.0) * scale, label=outer
    )
    shape_in = tb.Piece(x0=0, x1=edge, func=inside, label=label)
    shape_out = tb.Piece(x0=edge + 1, x1=lim.speed, func=lambda x: np.ones(np.shape(x)), label=outer)
    return fric_in, fric_out, shape_in, shape_out


@dataclass(frozen=True)
class _Row:
    """One table: its input, symmetry, pieces, stored unit and meaning, SI scale and unit."""

    source: str
    symmetry: str
    pieces: tuple[tb.Piece, ...]
    unit: str
    meaning: str
    si_scale: float
    si_unit: str


SYMBOLS = "(m: vehicle plus payload, c: their CoG ahead of P, b: half track)"


def _si(scale: float, unit: str) -> dict[str, Any]:
    """The SI scale and unit of a table stored at `scale` steps per SI unit."""
    return {"si_scale": 1 / scale, "si_unit": unit}


def _payload_rows(v: Vehicle, lim: Limits, k: float) -> dict[str, _Row]:
    """Payload tables: the dynamics' coefficients scaled to accumulator steps (k per newton)."""
    fw = v.firmware
    per_accel, per_speed2 = fw.accel_lsb_mps2 * k, fw.speed_lsb_mps**2 * k
    acc = "accumulator step"

    def row(f: Callable[[np.ndarray], np.ndarray], scale: float, unit: str, *, meaning: str, si: str) -> _Row:
        """A one-piece payload table of f(payload in kg) * scale."""
        piece = tb.Piece(x0=0, x1=lim.payload, func=lambda x: f(x * fw.mass_lsb_kg) * scale)
        return _Row(source="payload", symmetry="none", pieces=(piece,), unit=unit, meaning=meaning, **_si(scale, si))

    def mass(entry: int) -> Callable[[np.ndarray], np.ndarray]:
        return lambda p: dynamics.mass_matrix_entries(v, p)[entry]

    def grav(entry: int) -> Callable[[np.ndarray], np.ndarray]:
        return lambda p: dynamics.gravity_coefficients(v, p)[entry]

    def rolling(entry: int) -> Callable[[np.ndarray], np.ndarray]:
        return lambda p: dynamics.rolling_coefficients(v, p)[entry]

    return {
        "m11": row(mass(0), per_accel, f"{acc} per accel step", meaning="mass matrix M11 = M22", si="kg"),
        "m12": row(mass(1), per_accel, f"{acc} per accel step", meaning="mass matrix M12 = M21", si="kg"),
        "cor": row(
            lambda p: dynamics.coriolis_coefficient(v, p),
            per_speed2,
            f"{acc} per speed step^2",
            meaning=f"Coriolis coefficient m c / (4 b^2) {SYMBOLS}",
            si="kg/m",
        ),
        "grav_pitch": row(grav(0), k, f"{acc} at sin = 1", meaning="gravity m g / 2 (m: vehicle plus payload)", si="N"),
        "grav_roll": row(
            grav(1),
            k,
            f"{acc} at cos*sin = 1",
            meaning=f"roll gravity m c g / (2 b) {SYMBOLS}",
            si="N",
        ),
        "roll_level": row(
            rolling(0), k, f"{acc} at cos*cos = 1", meaning="rolling resistance on cos(pitch) cos(roll)", si="N"
        ),
        "roll_slope": row(
            rolling(1), k, f"{acc} at sin = 1", meaning="rolling-resistance load transfer on sin(pitch)", si="N"
        ),
    }


def _angle_rows(v: Vehicle, lim: Limits) -> dict[str, _Row]:
    ang = v.firmware.angle_lsb_rad
    rows = {}
    for name, source, top in (("pitch", "pitch", lim.pitch), ("roll", "roll", lim.roll)):
        rows[f"sin_{name}"] = _Row(
            source=source,
            symmetry="odd",
            pieces=(tb.Piece(x0=0, x1=top, func=lambda x: np.sin(x * ang)),),
            unit="1",
            meaning=f"sin({name})",
            si_scale=1.0,
            si_unit="1",
        )
        rows[f"cos_{name}"] = _Row(
            source=source,
            symmetry="even",
            pieces=(tb.Piece(x0=0, x1=top, func=lambda x: np.cos(x * ang)),),
            unit="1",
            meaning=f"cos({name})",
            si_scale=1.0,
            si_unit="1",
        )
    return {n: rows[n] for n in ("sin_pitch", "cos_pitch", "sin_roll", "cos_roll")}


MODEL_KEYS = {
    "payload": (
        "body.mass",
        "body.cog_ahead",
        "body.cog_height",
        "body.gyration_radius",
        "payload.mass_max",
        "payload.cog_ahead",
        "payload.cog_height",
        "payload.gyration_radius",
        "wheels.track",
    ),
    "pitch": ("firmware.angle_lsb", "envelope.pitch_max"),
    "roll": ("firmware.angle_lsb", "envelope.roll_max"),
    "speed": (
        "friction.coulomb",
        "friction.breakaway",
        "friction.stribeck_speed",
        "friction.viscous",
        "friction.deadband",
        "friction.deadband_shape",
    ),
}
EXTRA_KEYS = {
    "m11": ("wheels.diameter", "wheels.inertia", "drive.gear_ratio", "drive.rotor_inertia"),
    "roll_level": ("wheels.rolling_resistance", "casters.rolling_resistance", "casters.behind_axle"),
    "roll_slope": ("wheels.rolling_resistance", "casters.rolling_resistance", "casters.behind_axle"),
}


BLEND_KEYS = ("drive.efficiency", "drive.backdrive_efficiency", "drive.blend_speed")
SKID_KEYS = ("skid.wheels_per_side", "skid.wheelbase", "skid.lateral_friction")


def model_keys(name: str, source: str) -> tuple[str, ...]:
    """The model keys a table's values come from, for its comment."""
    if name == "shape":
        return ("friction.deadband", "friction.deadband_shape")
    if name in BLEND_TABLES:
        return BLEND_KEYS
    if name == "turn_shape":
        return ("wheels.track", "skid.turn_transition")
    if name == "turn_level":
        return MODEL_KEYS["payload"] + SKID_KEYS
    extra = EXTRA_KEYS.get(name, EXTRA_KEYS["m11"] if name in ("m12", "minv11", "minv12") else ())
    return MODEL_KEYS[source] + extra


SKID_EXTRA = {
    **{name: ("skid.wheels_per_side", "skid.motors_per_side") for name in ("m11", "m12", "minv11", "minv12")},
    "friction": ("skid.motors_per_side",),
}
"""The [skid] keys a table's values also come from in a skid-steer."""


def layout_keys(v: Vehicle, name: str, keys: tuple[str, ...]) -> tuple[str, ...]:
    """A table's model keys for this vehicle's layout: a skid-steer has no casters and adds its own."""
    if v.skid is None:
        return keys
    return tuple(k for k in keys if not k.startswith("casters.")) + SKID_EXTRA.get(name, ())


def _speed_rows(v: Vehicle, lim: Limits, k: float, edge: int) -> dict[str, _Row]:
    """Speed tables: drivetrain friction (accumulator steps, k per newton) and the deadband shape, their
    pieces split at `edge` (_speed_pieces)."""
    fric_in, fric_out, shape_in, shape_out = _speed_pieces(v, lim, k, edge)
    return {
        "friction": _Row(
            source="speed",
            symmetry="odd",
            pieces=(fric_in, fric_out),
            unit="accumulator step",
            meaning="drivetrain friction F(u)",
            si_scale=1 / k,
            si_unit="N",
        ),
        "shape": _Row(
            source="speed",
            symmetry="odd",
            pieces=(shape_in, shape_out),
            unit="1",
            meaning=f"deadband shape s(u), {v.friction.deadband_shape}",
            si_scale=1.0,
            si_unit="1",
        ),
    }


BLEND_TABLES = ("backdrive", "backdrive_inv")
"""The back-driving factor f(u) (feed-forward) and 1/f(u) (forward helper); none with a switch (w = 0)."""


def _blend_rows(v: Vehicle, lim: Limits) -> dict[str, _Row]:
    """dynamics.backdrive_factor over |u| in steps, and its reciprocal: one piece through the blend band
    (continued past it along its tangent, so a segment may straddle the band's end), one constant piece
    beyond it; no tables when the blend width is 0 (the firmware then scales by a constant)."""
    width, lsb, k = dynamics.blend_width(v), v.firmware.speed_lsb_mps, dynamics.backdrive_ratio(v)
    if width == 0:
        return {}
    end = min(fx.steps_within(width, lsb), lim.speed)

    def ratio(x: np.ndarray) -> np.ndarray:  # the band's straight line, continued
        return 1 + (k - 1) * (np.asarray(x, float) * lsb / width)

    def inverse(x: np.ndarray) -> np.ndarray:  # 1/ratio, continued along its tangent past the band
        t = np.asarray(x, float) * lsb / width
        tangent = 1 / k + (1 - k) / k**2 * (t - 1)
        return np.where(t <= 1, 1 / (1 + (k - 1) * np.minimum(t, 1)), tangent)

    rows = {}
    for name, func, outside, meaning in (
        ("backdrive", ratio, k, "back-driving factor f(u) = 1 + (k - 1) min(1, |u|/w), k = eta eta_back"),
        ("backdrive_inv", inverse, 1 / k, "its reciprocal 1/f(u), for the forward helper"),
    ):
        pieces = band_pieces(func, outside, end=end, top=lim.speed)
        rows[name] = _Row(
            source="speed", symmetry="even", pieces=pieces, unit="1", meaning=meaning, si_scale=1.0, si_unit="1"
        )
    return rows


def band_pieces(func: tb.Func, outside: float, *, end: int, top: int) -> tuple[tb.Piece, ...]:
    """A back-driving factor over |speed| in steps: `func` through the blend band 0..end, the constant
    `outside` beyond it up to `top` (no second piece when the band reaches the edge). The drive's and
    the lift's tables are both made here."""
    pieces = [tb.Piece(x0=0, x1=end, func=func, label="in the blend band")]
    if end < top:
        const = lambda x: np.full(np.shape(x), outside)  # noqa: E731
        pieces.append(tb.Piece(x0=end + 1, x1=top, func=const, label="beyond the blend band"))
    return tuple(pieces)


TURN_TABLES = ("turn_level", "turn_shape")
"""A skid-steer's turning resistance: T0 of the payload, and its shape s(w) of the rim-speed difference."""


def _turn_rows(v: Vehicle, lim: Limits, k: float) -> dict[str, _Row]:
    """The turning-resistance tables of a skid-steer (none without [skid]): T0 cos*cos in accumulator
    steps (k per newton), and s(w) over |u_R - u_L| in speed steps, split where its ramp ends."""
    if v.skid is None:
        return {}
    fw = v.firmware
    level = tb.Piece(x0=0, x1=lim.payload, func=lambda x: dynamics.turning_coefficient(v, x * fw.mass_lsb_kg) * k)
    top = 2 * lim.speed  # |u_R - u_L| of two clamped speeds
    full = 2 * dynamics.half_track(v) * v.skid.turn_transition_radps  # the difference of full resistance, m/s
    ramp_end = min(fx.steps_within(full, fw.speed_lsb_mps), top)
    ramp = lambda x: np.asarray(x, float) * fw.speed_lsb_mps / full  # noqa: E731
    pieces = [tb.Piece(x0=0, x1=ramp_end, func=ramp, label="turning slower than skid.turn_transition")]
    if ramp_end < top:
        one = lambda x: np.ones(np.shape(x))  # noqa: E731
        pieces.append(tb.Piece(x0=ramp_end + 1, x1=top, func=one, label="turning faster"))
    return {
        "turn_level": _Row(
            source="payload",
            symmetry="none",
            pieces=(level,),
            unit="accumulator step at cos*cos = 1",
            meaning="turning resistance mu_l m g a / (2 b) per side (a: mean |x| of a side's wheels)",
            **_si(k, "N"),
        ),
        "turn_shape": _Row(
            source=interface.SPEED_DIFFERENCE,
            symmetry="odd",
            pieces=tuple(pieces),
            unit="1",
            meaning="turning-resistance shape s(w) of the rim-speed difference u_R - u_L",
            si_scale=1.0,
            si_unit="1",
        ),
    }


def _inverse_rows(v: Vehicle, lim: Limits, inv: float) -> dict[str, _Row]:
    """Inverse mass matrix tables of the payload, in accel steps per (1/kg * accumulator step) * inv."""
    lsb = v.firmware.mass_lsb_kg

    def minv(entry: int) -> tb.Func:
        return lambda x: dynamics.inverse_mass_matrix_entries(v, x * lsb)[entry] * inv

    return {
        f"minv1{entry + 1}": _Row(
            source="payload",
            symmetry="none",
            pieces=(tb.Piece(x0=0, x1=lim.payload, func=minv(entry)),),
            unit="accel step per accumulator step",
            meaning=f"inverse mass matrix entry 1{entry + 1}",
            si_scale=1 / inv,
            si_unit="1/kg",
        )
        for entry in (0, 1)
    }


def friction_edge(v: Vehicle, lim: Limits, acc_amps: float) -> int:
    """Where the speed tables split when the Stribeck dip ends inside the envelope: stribeck_edge, measured
    against the current budget in accumulator steps of acc_amps; the deadband edge when there is no dip
    beyond it or it lasts to the last speed step or two (then nothing is gained)."""
    k = dynamics.motor_gain(v) / acc_amps
    edge = stribeck_edge(v, lim, k, v.firmware.current_budget_a / acc_amps)
    return edge if edge < lim.speed - 1 else lim.deadband


def flat_cosines(v: Vehicle, lim: Limits) -> tuple[tuple[float, float], tuple[float, float]]:
    """Midrange and half-range of cos(pitch), and of cos(pitch) cos(roll), over the envelope's steps:
    the constants a folded design holds them at, and the most the true value strays from them."""
    ang = v.firmware.angle_lsb_rad
    low_p = math.cos(lim.pitch * ang)
    low_pr = low_p * math.cos(lim.roll * ang)
    return ((1 + low_p) / 2, (1 - low_p) / 2), ((1 + low_pr) / 2, (1 - low_pr) / 2)


def _folded(v: Vehicle, lim: Limits, rows: dict[str, _Row]) -> dict[str, _Row]:
    """The rows with the cosines folded in (specs_for flat): roll gravity times cos(pitch)'s midrange, the
    rolling (and turning) level times that of cos(pitch) cos(roll); each table's error counts the most
    the held factor can miss by (Piece.slack); no cosine tables."""
    (c_p, d_p), (c_pr, d_pr) = flat_cosines(v, lim)
    out = {n: r for n, r in rows.items() if n not in ("cos_pitch", "cos_roll")}
    for name, (c, d, held) in {
        "grav_roll": (c_p, d_p, "cos(pitch)"),
        "roll_level": (c_pr, d_pr, "cos(pitch) cos(roll)"),
        "turn_level": (c_pr, d_pr, "cos(pitch) cos(roll)"),
    }.items():
        if name not in rows:
            continue
        (piece,) = rows[name].pieces
        peak = _peak(piece)
        folded = tb.Piece(x0=piece.x0, x1=piece.x1, func=_times(piece.func, c), slack=peak * d)
        out[name] = dataclasses.replace(
            rows[name],
            pieces=(folded,),
            unit=rows[name].unit.replace(" at cos*sin = 1", " at sin = 1").replace(" at cos*cos = 1", ""),
            meaning=f"{rows[name].meaning}; {held} held at {c:.6g} (within {d:.3g} over the envelope)",
        )
    return out


def _peak(piece: tb.Piece) -> float:
    """Largest |func| over the piece's inputs: all of them, or (more than 2^21) an even sample plus the
    most the function can rise between two samples, as tables.piece_error bounds it."""
    xs = tb.domain(piece)
    values = np.abs(piece.func(xs))
    if len(xs) == piece.span + 1:
        return float(np.max(values))
    return float(np.max(values)) + tb.sample_margin(xs, values)


def _times(f: tb.Func, c: float) -> tb.Func:
    """f times the constant c."""
    return lambda x: f(x) * c


def specs_for(
    v: Vehicle,
    lim: Limits,
    acc_amps: float,
    *,
    exact: bool = False,
    stribeck: bool = False,
    flat: bool = False,
) -> dict[str, tb.TableSpec]:
    """Every table's function, in units that make each product land on the accumulator scale. The
    back-driving factor tables are int16 (2^-14 near 1, a product that stays 32-bit) unless the design
    is exact (program.design), which keeps the word's precision for budgets that need it. `stribeck`
    splits the speed tables at the Stribeck edge instead of the deadband edge (friction_edge); `flat`
    folds the cosines into the payload tables that multiply them (_folded)."""
    fw, bits = v.firmware, fx.WORD_BITS[v.firmware.word]
    k = dynamics.motor_gain(v) / acc_amps  # accumulator steps per newton at the rim
    inv = acc_amps / dynamics.motor_gain(v) / fw.accel_lsb_mps2  # accel steps per (1/kg * accumulator step)
    payload = _payload_rows(v, lim, k)
    rows = {n: payload[n] for n in ("m11", "m12", "cor", "grav_pitch", "grav_roll", "roll_level", "roll_slope")}
    edge = friction_edge(v, lim, acc_amps) if stribeck else lim.deadband
    rows |= _angle_rows(v, lim) | _speed_rows(v, lim, k, edge) | _inverse_rows(v, lim, inv) | _blend_rows(v, lim)
    rows |= _turn_rows(v, lim, k)
    if flat:
        rows = _folded(v, lim, rows)
    return {
        name: tb.make_spec(
            name,
            r.source,
            r.symmetry,
            r.pieces,
            bits=16 if name in BLEND_TABLES and not exact else bits,
            unit=r.unit,
            meaning=r.meaning,
            si_scale=r.si_scale,
            si_unit=r.si_unit,
            model_keys=layout_keys(v, name, model_keys(name, r.source)),
        )
        for name, r in rows.items()
    }
