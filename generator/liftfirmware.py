"""The lift's feed-forward in fixed point: its tables (from lift.py's physics), its program in the op
vocabulary (ops.py), sized to the lift's own budget and proven like the drive's (sizing, analysis).

    force  = lift_mass(p) * a + lift_gravity(p) + lift_friction(v)      motoring current, accumulator steps
    motor  = force, times lift_backdrive(v) where force and v oppose     the load drives the motor
    current = motor + lift_rotor * a                                     the rotor's own inertia, no screw loss
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import analysis, interface, lift, program, sizing, tablespecs
from . import fixedpoint as fx
from . import tables as tb
from .dynamics import G_N
from .errors import CheckFailed
from .ops import Program
from .vehicle import Lift, Vehicle


@dataclass(frozen=True)
class LiftLimits:
    """The lift's envelope edges in its firmware steps (each containing its stated limit), the deadband's
    last step inside, and the current limit in output steps."""

    speed: int
    accel: int
    payload: int
    deadband: int
    current: int


@dataclass(frozen=True, kw_only=True)
class LiftFirmware:
    """The lift function, sized and proven: what the renderer, the vectors and the gate need."""

    program: Program
    specs: dict[str, tb.TableSpec]
    tables: dict[str, tb.Table]
    errors: dict[str, tuple[tb.PieceError, ...]]
    proof: analysis.Proof
    limits: LiftLimits
    guard_bits: int
    amps_per_acc: float
    bound_a: float

    @property
    def total_bytes(self) -> int:
        return sum(t.bytes for t in self.tables.values())


@dataclass(frozen=True, kw_only=True)
class Text:
    """A lift table's working unit, meaning, and SI unit with the SI value of one working unit."""

    unit: str
    meaning: str
    si_unit: str
    si_scale: float


Row = tuple[str, str, tuple[tb.Piece, ...], Text]
"""A table before its format is chosen: input, symmetry, pieces, texts."""


def limits_of(lt: Lift) -> LiftLimits:
    return LiftLimits(
        speed=fx.steps_covering(lt.speed_max_mps, lt.speed_lsb_mps),
        accel=fx.steps_covering(lt.accel_max_mps2, lt.accel_lsb_mps2),
        payload=fx.steps_covering(lt.payload_max_kg, lt.mass_lsb_kg),
        deadband=fx.steps_within(lt.deadband_mps, lt.speed_lsb_mps),
        current=fx.steps_covering(lt.current_limit_a, lt.current_lsb_a),
    )


def motor_gain(lt: Lift) -> float:
    """Motoring current per newton on the carriage, A/N: 1 / (2 pi i / lead * eta * k_t)."""
    return 1 / (lift.motor_rad_per_m(lt) * lt.efficiency * lt.torque_constant_nm_per_a)


def _rows(lt: Lift, lim: LiftLimits, acc_amps: float) -> dict[str, Row]:
    """name -> (source, symmetry, pieces, texts) of every lift table, in accumulator units."""
    k = motor_gain(lt) / acc_amps  # accumulator steps per newton
    return _payload_rows(lt, lim, acc_amps, k) | _friction_rows(lt, lim, k) | _blend_rows(lt, lim)


def _payload_rows(lt: Lift, lim: LiftLimits, acc_amps: float, k: float) -> dict[str, Row]:
    """The payload tables: moving mass, weight less counterweight and assist, and the rotor (a constant)."""
    mass_lsb, accel_lsb = lt.mass_lsb_kg, lt.accel_lsb_mps2
    up, down = lt.carriage_mass_kg, lt.counterweight_kg
    rotor = lt.rotor_inertia_kgm2 * lift.motor_rad_per_m(lt) * accel_lsb / lt.torque_constant_nm_per_a / acc_amps

    def payload(func: tb.Func) -> tuple[tb.Piece, ...]:
        return (tb.Piece(x0=0, x1=lim.payload, func=func),)

    return {
        "lift_mass": (
            "payload",
            "none",
            payload(lambda x: (up + x * mass_lsb + down) * accel_lsb * k),
            Text(
                unit="accumulator step per accel step",
                meaning="moving mass m_c + p + m_w",
                si_unit="kg",
                si_scale=1 / (accel_lsb * k),
            ),
        ),
        "lift_gravity": (
            "payload",
            "none",
            payload(lambda x: ((up + x * mass_lsb - down) * G_N - lt.assist_force_n) * k),
            Text(
                unit="accumulator step",
                meaning="weight less counterweight and assist, (m_c + p - m_w) g - F_assist",
                si_unit="N",
                si_scale=1 / k,
            ),
        ),
        "lift_rotor": (
            "payload",
            "none",
            payload(lambda x: np.full(np.shape(x), rotor)),
            Text(
                unit="accumulator step per accel step",
                meaning="rotor inertia as current, J_r (2 pi i / lead) / k_t (no screw loss)",
                si_unit="A*s^2/m",
                si_scale=acc_amps / accel_lsb,
            ),
        ),
    }


def _friction_rows(lt: Lift, lim: LiftLimits, k: float) -> dict[str, Row]:
    """Friction over |v| in steps: the ramp through the deadband (a straight line, continued past it),
    Coulomb plus viscous beyond it."""
    lsb = lt.speed_lsb_mps
    ramp = lt.coulomb_n / lt.deadband_mps + lt.viscous_ns_per_m  # N per m/s inside the deadband
    pieces = (
        tb.Piece(x0=0, x1=lim.deadband, func=lambda x: ramp * x * lsb * k, label="in the deadband"),
        tb.Piece(
            x0=lim.deadband + 1,
            x1=lim.speed,
            func=lambda x: (lt.coulomb_n + lt.viscous_ns_per_m * x * lsb) * k,
            label="beyond the deadband",
        ),
    )
    text = Text(unit="accumulator step", meaning="guide and screw friction F(v)", si_unit="N", si_scale=1 / k)
    return {"lift_friction": ("speed", "odd", pieces, text)}


def _blend_rows(lt: Lift, lim: LiftLimits) -> dict[str, Row]:
    """lift.backdrive_factor over |v| in steps: a straight line through the blend band (continued past
    it), a constant beyond it."""
    width, k = lift.blend_width(lt), lt.efficiency * lt.backdrive_efficiency
    end = min(fx.steps_within(width, lt.speed_lsb_mps), lim.speed)
    ratio = lambda x: 1 + (k - 1) * np.asarray(x, float) * lt.speed_lsb_mps / width  # noqa: E731
    pieces = tablespecs.band_pieces(ratio, k, end=end, top=lim.speed)
    text = Text(
        unit="1",
        meaning="back-driving factor f(v) = 1 + (k - 1) min(1, |v|/w), k = eta eta_back",
        si_unit="1",
        si_scale=1.0,
    )
    return {"lift_backdrive": ("speed", "even", pieces, text)}


MOTOR_KEYS = ("lift.lead", "lift.gear_ratio", "lift.efficiency", "lift.torque_constant")
KEYS = {
    "lift_mass": ("lift.carriage_mass", "lift.counterweight", "lift.mass_lsb", "lift.accel_lsb", *MOTOR_KEYS),
    "lift_gravity": ("lift.carriage_mass", "lift.counterweight", "lift.assist_force", "lift.mass_lsb", *MOTOR_KEYS),
    "lift_rotor": ("lift.rotor_inertia", "lift.lead", "lift.gear_ratio", "lift.torque_constant", "lift.accel_lsb"),
    "lift_friction": ("lift.coulomb", "lift.viscous", "lift.deadband", "lift.speed_lsb", *MOTOR_KEYS),
    "lift_backdrive": ("lift.efficiency", "lift.backdrive_efficiency", "lift.deadband", "lift.speed_lsb"),
}
"""The model keys each lift table's values come from, for its C comment."""


def _specs(lt: Lift, lim: LiftLimits, acc_amps: float, bits: int) -> dict[str, tb.TableSpec]:
    out = {}
    for name, (source, symmetry, pieces, text) in _rows(lt, lim, acc_amps).items():
        out[name] = tb.make_spec(
            name,
            source,
            symmetry,
            pieces,
            bits=16 if name == "lift_backdrive" else bits,  # a factor near 1: Q14, as the drive's
            unit=text.unit,
            meaning=text.meaning,
            si_scale=text.si_scale,
            si_unit=text.si_unit,
            model_keys=KEYS[name],
        )
    return out


def _peak_steps(lt: Lift) -> float:
    """An upper bound of |accumulated current| in output steps, from the envelope's corners (lift.corners)."""
    p, s, a = lift.corners(lt)
    force = np.abs(lift.load_force(lt, p, s, a)) * motor_gain(lt)
    rotor = lt.rotor_inertia_kgm2 * lift.motor_rad_per_m(lt) * lt.accel_max_mps2 / lt.torque_constant_nm_per_a
    return float(np.max(force) + rotor) / lt.current_lsb_a * 1.25 + 4


def _product(bd: program._Builder, dst: str, a: str, b: str, *, shift: int) -> None:
    """a * b / 2^shift in accumulator steps: a rounded product, or (a table stored in steps of 2^-shift,
    shift < 0) the exact product scaled up."""
    if shift >= 0:
        bd.mul(dst, a, b, shift)
    else:
        bd.scale(dst, bd.mul(f"{dst}_steps", a, b, 0), 1, shift)


def _program(lt: Lift, v: Vehicle, specs: dict[str, tb.TableSpec], *, lim: LiftLimits, guard: int) -> Program:
    call = interface.LIFT
    prog = Program(call)
    bd = program._Builder(prog, specs, specs["lift_mass"].bits, exact=False, vehicle=v)
    for m in call.inputs.members:
        hi = getattr(lim, m.limit)
        bd.clamp(m.value, m.name, None, lo=-hi if m.signed else 0, hi=hi, bit=call.clamp_bit(m.name))
    bd.lookup("t_mass", "lift_mass", "payload")
    bd.lookup("t_gravity", "lift_gravity", "payload")
    bd.lookup("t_rotor", "lift_rotor", "payload")
    bd.lookup("t_friction", "lift_friction", "speed")
    _product(bd, "inertia", "t_mass", "accel", shift=specs["lift_mass"].frac_bits)
    bd.scale("gravity", "t_gravity", 1, specs["lift_gravity"].frac_bits)
    bd.scale("friction", "t_friction", 1, specs["lift_friction"].frac_bits)
    bd.sum("force", (1, "inertia"), (1, "gravity"), (1, "friction"))
    bd.backdrive("motor", "force", "speed", lt.efficiency * lt.backdrive_efficiency, table="lift_backdrive")
    _product(bd, "rotor", "t_rotor", "accel", shift=specs["lift_rotor"].frac_bits)
    bd.sum("total", (1, "motor"), (1, "rotor"))
    bd.store("current", None, "total", guard)
    return prog


def synthesise(v: Vehicle) -> LiftFirmware | None:
    """The lift function sized to lift.current_budget (fewest table bytes: its tables are straight lines
    but for the deadband and blend corners) and proven; None without a lift; CheckFailed when the budget
    cannot be met."""
    lt = v.lift
    if lt is None:
        return None
    lim = limits_of(lt)
    guard = program._guard_bits(_peak_steps(lt))
    acc_amps = lt.current_lsb_a * 2.0**-guard
    specs = _specs(lt, lim, acc_amps, fx.WORD_BITS[v.firmware.word])
    prog = _program(lt, v, specs, lim=lim, guard=guard)
    budget = lt.current_budget_a / lt.current_lsb_a
    try:
        sized = sizing.size(prog, specs, list(specs), budget, what=f"{lt.current_budget_a:g} A", objective=sizing.BYTES)
    except CheckFailed as exc:
        raise CheckFailed(
            f"{v.source}: lift.current_budget: {exc} of {lt.current_lsb_a:g} A (lift.current_lsb)"
        ) from None
    tables = {n: sized.tables[n] for n in specs}
    return LiftFirmware(
        program=prog,
        specs=specs,
        tables=tables,
        errors={n: sized.errors[n] for n in specs},
        proof=analysis.prove(prog, tables),
        limits=lim,
        guard_bits=guard,
        amps_per_acc=acc_amps,
        bound_a=sized.bound_steps * lt.current_lsb_a,
    )


def inputs_from_si(
    lt: Lift, payload_kg: np.ndarray, speed_mps: np.ndarray, accel_mps2: np.ndarray
) -> dict[str, np.ndarray]:
    """SI values -> the lift function's input steps (round to nearest)."""
    return {
        "speed": np.rint(np.asarray(speed_mps, float) / lt.speed_lsb_mps).astype(np.int64),
        "accel": np.rint(np.asarray(accel_mps2, float) / lt.accel_lsb_mps2).astype(np.int64),
        "payload": np.rint(np.asarray(payload_kg, float) / lt.mass_lsb_kg).astype(np.int64),
    }


def float_current_steps(lt: Lift, steps: dict[str, np.ndarray]) -> np.ndarray:
    """The float model's current in output steps at the (clamped) step inputs: what the bound is proven against."""
    return (
        lift.motor_current(
            lt, steps["payload"] * lt.mass_lsb_kg, steps["speed"] * lt.speed_lsb_mps, steps["accel"] * lt.accel_lsb_mps2
        )
        / lt.current_lsb_a
    )
