"""The firmware feed-forward as a straight-line integer program: the specification the C follows.

The builder turns a vehicle into table specs and two op lists (feed-forward and forward dynamics).
Python decides every Q format, shift and constant here; the emulator interprets the ops, the
analysis proves them, and the templates print one C statement per op.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import assert_never

import numpy as np

from . import dynamics, interface
from . import fixedpoint as fx
from . import tables as tb
from .vehicle import Vehicle

INT32_MAX = fx.word_max(32)


@dataclass(frozen=True)
class Clamp:
    """dst = in.field[index] clamped to [lo, hi]; flags |= bit when it was outside."""

    dst: str
    field: str
    index: int | None
    lo: int
    hi: int
    bit: int


@dataclass(frozen=True)
class Lookup:
    dst: str
    table: str
    src: str


@dataclass(frozen=True)
class Mul:
    """dst = round(a * b / 2^shift) (ties up) for shift > 0, a * b * 2^-shift otherwise; a, b signals."""

    dst: str
    a: str
    b: str
    shift: int


@dataclass(frozen=True)
class Scale:
    """dst = round(a * k / 2^shift) (ties up) for shift > 0, a * k * 2^-shift otherwise; k a constant."""

    dst: str
    a: str
    k: int
    shift: int


@dataclass(frozen=True)
class Sum:
    dst: str
    terms: tuple[tuple[int, str], ...]  # (+1 or -1, signal)


@dataclass(frozen=True)
class Backdrive:
    """dst = src when src and speed do not oppose, else round(src * k / 2^shift)."""

    dst: str
    src: str
    speed: str
    k: int
    shift: int
    k_exact: float


@dataclass(frozen=True)
class Store:
    """out.field[index] = round(src / 2^shift); `dst` is that output's column name (`current_right`)."""

    dst: str
    field: str
    index: int
    src: str
    shift: int


Op = Clamp | Lookup | Mul | Scale | Sum | Backdrive | Store
"""Every op kind. A new kind is added here, then wherever `assert_never` fails the type check:
op_range (below), emulate.run, analysis.prove, analysis._error_step, cview._op_view, ff/ops.j2."""


def op_inputs(op: Op) -> tuple[str, ...]:
    """The signals an op reads (a Clamp reads an input field, not a signal)."""
    match op:
        case Clamp():
            return ()
        case Lookup():
            return (op.src,)
        case Mul():
            return (op.a, op.b)
        case Scale():
            return (op.a,)
        case Sum():
            return tuple(name for _, name in op.terms)
        case Backdrive():
            return (op.src, op.speed)
        case Store():
            return (op.src,)
        case _:
            assert_never(op)


SLOW_FIELDS = ("pitch", "roll", "payload")
"""Inputs that change slowly (an inclination filter at tens of hertz, a payload once per load)."""


@dataclass(frozen=True)
class Split:
    """A program in two rates: the ops that depend only on the slow inputs, the rest, and the slow
    signals the fast ops read (the state the slow part hands over, in program order)."""

    slow: tuple[Op, ...]
    fast: tuple[Op, ...]
    state: tuple[str, ...]


def split(program: Program) -> Split:
    """Partition the ops by dataflow: an op is slow when it clamps a slow input or reads only slow
    signals. Running the slow ops, then the fast ones, is the same program: the same integers."""
    slow_names: set[str] = set()
    slow, fast = [], []
    for op in program.ops:
        if _is_slow(op, slow_names):
            slow.append(op)
            slow_names.add(op.dst)
        else:
            fast.append(op)
    used = {name for op in fast for name in op_inputs(op)}
    state = tuple(op.dst for op in slow if op.dst in used)
    return Split(tuple(slow), tuple(fast), state)


def _is_slow(op: Op, slow_names: set[str]) -> bool:
    """A clamp of a slow input, or an op reading only slow signals; outputs are written at the fast rate."""
    match op:
        case Clamp():
            return op.field in SLOW_FIELDS
        case Store():
            return False
        case Lookup() | Mul() | Scale() | Sum() | Backdrive():
            return all(name in slow_names for name in op_inputs(op))
        case _:
            assert_never(op)


def op_table(op: Op) -> str | None:
    """The table an op looks up, if any."""
    match op:
        case Lookup():
            return op.table
        case Clamp() | Mul() | Scale() | Sum() | Backdrive() | Store():
            return None
        case _:
            assert_never(op)


def rounding_half(shift: int) -> int:
    """What "add half, then shift right" adds: 2^(shift-1) for shift > 0, else nothing."""
    return (1 << (shift - 1)) if shift > 0 else 0


def op_range(op: Op, rng: dict[str, fx.Interval], lookup: Callable[[Lookup], fx.Interval]) -> fx.Interval:
    """The value range an op's result can take, from the ranges of its operands. `lookup` gives a
    table's range: estimated while building, exact once the tables are sized."""
    match op:
        case Clamp():
            return fx.Interval(op.lo, op.hi)
        case Lookup():
            return lookup(op)
        case Mul():
            return (rng[op.a] * rng[op.b]).shift_round(op.shift)
        case Scale():
            return (rng[op.a] * fx.Interval(op.k, op.k)).shift_round(op.shift)
        case Sum():
            total = fx.Interval(0, 0)
            for sign, name in op.terms:
                total = total + (rng[name] if sign > 0 else -rng[name])
            return total
        case Backdrive():
            r = rng[op.src]
            return r.hull((r * fx.Interval(op.k, op.k)).shift_round(op.shift))
        case Store():
            return rng[op.src].shift_round(op.shift)
        case _:
            assert_never(op)


@dataclass
class Program:
    """One C function (its structs described in `interface`) as a list of ops."""

    call: interface.Call
    ops: list[Op] = field(default_factory=list)

    @property
    def name(self) -> str:
        return self.call.name


@dataclass(frozen=True)
class Limits:
    """Envelope edges in firmware steps (see limits_of)."""

    speed: int
    accel: int
    pitch: int
    roll: int
    payload: int
    deadband: int
    current: int


@dataclass
class Design:
    """What the builder produces: table specs, the two programs and the scales they rest on."""

    vehicle: Vehicle
    specs: dict[str, tb.TableSpec]
    feedforward: Program
    forward: Program
    limits: Limits
    guard_bits: int
    accel_guard_bits: int
    amps_per_acc: float
    exact: bool = False  # products keep every operand bit (see design)


def limits_of(v: Vehicle) -> Limits:
    """Envelope edges in steps, each containing its stated limit (rounded up), so an input of exactly the
    limit is inside; the deadband edge is the last step inside the deadband (rounded down)."""
    fw, env = v.firmware, v.envelope
    lim = Limits(
        speed=fx.steps_covering(env.speed_max_mps, fw.speed_lsb_mps),
        accel=fx.steps_covering(env.accel_max_mps2, fw.accel_lsb_mps2),
        pitch=fx.steps_covering(env.pitch_max_rad, fw.angle_lsb_rad),
        roll=fx.steps_covering(env.roll_max_rad, fw.angle_lsb_rad),
        payload=fx.steps_covering(v.payload.mass_max_kg, fw.mass_lsb_kg),
        deadband=fx.steps_within(v.friction.deadband_mps, fw.speed_lsb_mps),
        current=fx.steps_covering(v.drive.current_limit_a, fw.current_lsb_a),
    )
    assert lim.deadband < lim.speed, "the loader keeps the deadband below speed_max"
    return lim


class _Builder:
    """Appends ops and keeps a conservative integer range per signal (for pre-shift decisions)."""

    def __init__(self, program: Program, specs: dict[str, tb.TableSpec], bits: int, *, exact: bool) -> None:
        self.p, self.specs, self.bits, self.exact = program, specs, bits, exact
        self.rng: dict[str, fx.Interval] = {}
        self.cor_shift = 0  # the Coriolis product's shift once its shared prefactor is made

    def _add(self, op: Op) -> None:
        """Append an op and record its result's range by the one range rule (op_range)."""
        self.p.ops.append(op)
        self.rng[op.dst] = op_range(op, self.rng, self._estimate)

    def _estimate(self, op: Lookup) -> fx.Interval:
        """A table's range before it is sized: its largest value, one step of margin."""
        spec = self.specs[op.table]
        top = math.ceil(spec.max_abs * 2.0**spec.frac_bits) + 1
        return fx.Interval(-top, top)

    def clamp(self, dst: str, fieldname: str, index: int | None, *, lo: int, hi: int, bit: int) -> str:
        self._add(Clamp(dst, fieldname, index, lo, hi, bit))
        return dst

    def lookup(self, dst: str, table: str, src: str) -> str:
        self._add(Lookup(dst, table, src))
        return dst

    def mul(self, dst: str, a: str, b: str, shift: int) -> str:
        """Product with rounding. Unless the design is exact, a product too wide for 32 bits first
        rounds its operands down (pre-shift), balanced to add the least error (the bound counts it)."""
        if not self.exact and shift > 0:
            pa, pb = _preshift(self.rng[a], self.rng[b], shift)
            a = self._shifted(a, pa) if pa else a
            b = self._shifted(b, pb) if pb else b
            shift -= pa + pb
        self._add(Mul(dst, a, b, shift))
        return dst

    def product(self, dst: str, a: str, b: str) -> tuple[str, int]:
        """a * b kept in 32 bits: when the exact product could not fit, the operands are rounded down
        first (one bit at a time from the larger); returns the product and the bits dropped in all."""
        ka = kb = 0
        while not _fits32(self.rng[a].shift_round(ka) * self.rng[b].shift_round(kb), 0):
            if self.rng[a].shift_round(ka).magnitude() >= self.rng[b].shift_round(kb).magnitude():
                ka += 1
            else:
                kb += 1
        a2 = self._shifted(a, ka) if ka else a
        b2 = self._shifted(b, kb) if kb else b
        return self.mul(dst, a2, b2, 0), ka + kb

    def _shifted(self, src: str, pre: int) -> str:
        """src rounded down by `pre` bits, computed once however many products use it."""
        name = f"{src}_s{pre}"
        return name if name in self.rng else self.scale(name, src, 1, pre)

    def scale(self, dst: str, a: str, k: int, shift: int) -> str:
        """a times the constant k, with rounding (shift > 0) or scaled up (shift < 0)."""
        self._add(Scale(dst, a, k, shift))
        return dst

    def sum(self, dst: str, *terms: tuple[int, str]) -> str:
        self._add(Sum(dst, tuple(terms)))
        return dst

    def backdrive(self, dst: str, src: str, speed: str, k_exact: float) -> str:
        """k_exact in fixed point: 14 fraction bits with int16 tables; with int32, 30 in an exact design,
        else the most that keeps the product in 32 bits (directly or in two exact parts)."""
        top = 14 if self.bits == 16 else 30
        if k_exact > 1:
            top -= math.ceil(math.log2(k_exact))
        kbits = top
        while not (self.bits == 16 or self.exact) and kbits > 1 and not _k_fits(self.rng[src], k_exact, kbits):
            kbits -= 1
        k = int(math.floor(k_exact * 2.0**kbits + 0.5))
        self._add(Backdrive(dst, src, speed, k, kbits, k_exact))
        return dst

    def store(self, fieldname: str, index: int, src: str, shift: int) -> None:
        self._add(Store(f"{fieldname}_{interface.SIDES[index]}", fieldname, index, src, shift))


def _fits32(prod: fx.Interval, shift: int) -> bool:
    half = rounding_half(shift)
    return prod.lo >= -INT32_MAX - 1 and prod.hi + half <= INT32_MAX


def split_fits(x: fx.Interval, y: fx.Interval, shift: int) -> bool:
    """round(x * y / 2^s) = (x >> s) * y + (((x & (2^s - 1)) * y + half) >> s) exactly (x = (x >> s) 2^s +
    its low bits); usable when both partial products fit 32 bits: no 64-bit multiply, which is a library
    call on Cortex-M0+."""
    if shift <= 0:
        return False
    high = fx.Interval(x.lo >> shift, x.hi >> shift) * y
    low = fx.Interval(0, (1 << shift) - 1) * y
    return high.fits(32) and _fits32(low, shift)


def _k_fits(src: fx.Interval, k_exact: float, kbits: int) -> bool:
    """Whether src * k (k_exact with kbits fraction bits) fits 32 bits directly or split at kbits."""
    k = fx.Interval(*(2 * [int(math.floor(k_exact * 2.0**kbits + 0.5))]))
    return _fits32(src * k, kbits) or split_fits(src, k, kbits)


def _preshift(ra: fx.Interval, rb: fx.Interval, shift: int) -> tuple[int, int]:
    """Bits (pa, pb) to round a and b down by, pa + pb <= shift, so that the product fits 32 bits,
    choosing the pair that adds the least error (|b| 2^(pa-1) + |a| 2^(pb-1)); (0, 0) when the product
    fits as it is or no pair makes it fit (the proof then picks an exact two-part or 64-bit form)."""
    if _fits32(ra * rb, shift):
        return 0, 0
    best: tuple[int, int, int] | None = None
    for pa in range(shift + 1):
        sa = ra.shift_round(pa)
        for pb in range(shift - pa + 1):
            if _fits32(sa * rb.shift_round(pb), shift - pa - pb):
                cost = rb.magnitude() * rounding_half(pa) + ra.magnitude() * rounding_half(pb)
                if best is None or cost < best[0]:
                    best = (cost, pa, pb)
                break  # rounding b further only adds error
    return (best[1], best[2]) if best is not None else (0, 0)


def _speed_pieces(v: Vehicle, lim: Limits, scale: float) -> tuple[tb.Piece, tb.Piece, tb.Piece, tb.Piece]:
    """Friction and deadband-shape pieces of |u| in steps, split exactly at the deadband edge; each
    piece's function continues smoothly past its end (breakpoints may sit there)."""
    lsb = v.firmware.speed_lsb_mps

    def inside(x: np.ndarray) -> np.ndarray:
        return dynamics.deadband_inside(v, x * lsb)

    fric_in = tb.Piece(
        0, lim.deadband, lambda x: dynamics.friction_force(v, x * lsb, inside(x)) * scale, "inside the deadband"
    )
    fric_out = tb.Piece(
        lim.deadband + 1, lim.speed, lambda x: dynamics.friction_force(v, x * lsb, 1.0) * scale, "outside the deadband"
    )
    shape_in = tb.Piece(0, lim.deadband, inside, "inside the deadband")
    shape_out = tb.Piece(lim.deadband + 1, lim.speed, lambda x: np.ones(np.shape(x)), "outside the deadband")
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


def _payload_rows(v: Vehicle, lim: Limits, k: float) -> dict[str, _Row]:
    """Payload tables: the dynamics' coefficients scaled to accumulator steps (k per newton)."""
    fw = v.firmware
    per_accel, per_speed2 = fw.accel_lsb_mps2 * k, fw.speed_lsb_mps**2 * k
    acc = "accumulator step"

    def row(f: Callable[[np.ndarray], np.ndarray], scale: float, unit: str, *, meaning: str, si: str) -> _Row:
        """A one-piece payload table of f(payload in kg) * scale."""
        piece = tb.Piece(0, lim.payload, lambda x: f(x * fw.mass_lsb_kg) * scale)
        return _Row("payload", "none", (piece,), unit, meaning, 1 / scale, si)

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
            source, "odd", (tb.Piece(0, top, lambda x: np.sin(x * ang)),), "1", f"sin({name})", 1.0, "1"
        )
        rows[f"cos_{name}"] = _Row(
            source, "even", (tb.Piece(0, top, lambda x: np.cos(x * ang)),), "1", f"cos({name})", 1.0, "1"
        )
    return {n: rows[n] for n in ("sin_pitch", "cos_pitch", "sin_roll", "cos_roll")}


def _specs(v: Vehicle, lim: Limits, acc_amps: float) -> dict[str, tb.TableSpec]:
    """Every table's function, in units that make each product land on the accumulator scale."""
    fw, bits = v.firmware, fx.WORD_BITS[v.firmware.word]
    k = dynamics.motor_gain(v) / acc_amps  # accumulator steps per newton at the rim
    fric_in, fric_out, shape_in, shape_out = _speed_pieces(v, lim, k)
    inv = acc_amps / dynamics.motor_gain(v) / fw.accel_lsb_mps2  # accel steps per (1/kg * accumulator step)

    def minv(entry: int) -> tb.Func:
        return lambda x: dynamics.inverse_mass_matrix_entries(v, x * fw.mass_lsb_kg)[entry] * inv

    payload = _payload_rows(v, lim, k)
    rows = {n: payload[n] for n in ("m11", "m12", "cor", "grav_pitch", "grav_roll", "roll_level", "roll_slope")}
    rows |= _angle_rows(v, lim)
    rows["friction"] = _Row(
        "speed", "odd", (fric_in, fric_out), "accumulator step", "drivetrain friction F(u)", 1 / k, "N"
    )
    rows["shape"] = _Row(
        "speed", "odd", (shape_in, shape_out), "1", f"deadband shape s(u), {v.friction.deadband_shape}", 1.0, "1"
    )
    for entry in (0, 1):
        rows[f"minv1{entry + 1}"] = _Row(
            "payload",
            "none",
            (tb.Piece(0, lim.payload, minv(entry)),),
            "accel step per accumulator step",
            f"inverse mass matrix entry 1{entry + 1}",
            1 / inv,
            "1/kg",
        )
    return {
        name: tb.make_spec(
            name,
            r.source,
            r.symmetry,
            r.pieces,
            bits=bits,
            unit=r.unit,
            meaning=r.meaning,
            si_scale=r.si_scale,
            si_unit=r.si_unit,
        )
        for name, r in rows.items()
    }


SIGNAL = {
    "speed": "speed",
    "accel": "accel",
    "current": "cur",
    "pitch": "pitch",
    "roll": "roll",
    "payload": "payload",
}  # member -> the program's signal name of its clamped value


def _clamps(bd: _Builder, lim: Limits, call: interface.Call, order: tuple[str, ...]) -> None:
    """Clamp every input member in `order`; bounds and flag bits come from the interface."""
    for name in order:
        m = call.inputs.member(name)
        hi = getattr(lim, m.limit)
        lo = -hi if m.signed else 0
        for side, column in enumerate(m.columns):
            dst = f"{SIGNAL[name]}_{'rl'[side]}" if m.count == 2 else SIGNAL[name]
            bd.clamp(dst, name, side if m.count == 2 else None, lo=lo, hi=hi, bit=call.clamp_bit(column))


def _common(bd: _Builder, lim: Limits, call: interface.Call, pair: str) -> None:
    """All clamps first (the flags are then final and leave the registers), then the pitch/roll/payload
    lookups, gravity and the rolling-resistance level. `pair` is the other two-wheel input."""
    _clamps(bd, lim, call, ("pitch", "roll", "payload", "speed", pair))
    s = bd.specs
    for name, src in (
        ("sin_pitch", "pitch"),
        ("cos_pitch", "pitch"),
        ("sin_roll", "roll"),
        ("cos_roll", "roll"),
        ("cor", "payload"),
        ("grav_pitch", "payload"),
        ("grav_roll", "payload"),
        ("roll_level", "payload"),
        ("roll_slope", "payload"),
    ):
        bd.lookup(f"t_{name}", name, src)
    bd.mul("g_pitch", "t_grav_pitch", "t_sin_pitch", s["grav_pitch"].frac_bits + s["sin_pitch"].frac_bits)
    bd.mul("cos_sin", "t_cos_pitch", "t_sin_roll", s["cos_pitch"].frac_bits)
    bd.mul("g_roll", "t_grav_roll", "cos_sin", s["grav_roll"].frac_bits + s["sin_roll"].frac_bits)
    bd.mul("cos_cos", "t_cos_pitch", "t_cos_roll", s["cos_pitch"].frac_bits)
    bd.mul("r_up", "t_roll_level", "cos_cos", s["roll_level"].frac_bits + s["cos_roll"].frac_bits)
    bd.mul("r_down", "t_roll_slope", "t_sin_pitch", s["roll_slope"].frac_bits + s["sin_pitch"].frac_bits)
    bd.sum("r_level", (1, "r_up"), (-1, "r_down"))
    bd.sum("grav_r", (1, "g_pitch"), (1, "g_roll"))  # each wheel's gravity once, in the slow part
    bd.sum("grav_l", (1, "g_pitch"), (-1, "g_roll"))
    bd.sum("d_speed", (1, "speed_r"), (-1, "speed_l"))
    _, dropped = bd.product("cor_pre", "t_cor", "d_speed")  # shared by both wheels' Coriolis terms
    bd.cor_shift = s["cor"].frac_bits - dropped


def _passive(bd: _Builder, side: str, sign: int, other: str) -> str:
    """Coriolis + friction + rolling + gravity at one wheel, accumulator steps."""
    s = bd.specs
    u = f"speed_{side}"
    bd.mul(f"cor_{side}", "cor_pre", f"speed_{other}", bd.cor_shift)
    bd.lookup(f"t_fric_{side}", "friction", u)  # adjacent lookups of one input share abs and split in C
    bd.lookup(f"t_shape_{side}", "shape", u)
    bd.scale(f"fric_{side}", f"t_fric_{side}", 1, s["friction"].frac_bits)
    bd.mul(f"roll_{side}", "r_level", f"t_shape_{side}", s["shape"].frac_bits)
    return bd.sum(
        f"passive_{side}",
        (sign, f"cor_{side}"),
        (1, f"fric_{side}"),
        (1, f"roll_{side}"),
        (1, f"grav_{side}"),
    )


def _feedforward(v: Vehicle, specs: dict[str, tb.TableSpec], lim: Limits, *, guard: int, exact: bool) -> Program:
    prog = Program(interface.FEEDFORWARD)
    bd = _Builder(prog, specs, specs["m11"].bits, exact=exact)
    _common(bd, lim, prog.call, "accel")
    bd.lookup("t_m11", "m11", "payload")
    bd.lookup("t_m12", "m12", "payload")
    for side, sign, other, idx in (("r", 1, "l", 0), ("l", -1, "r", 1)):
        passive = _passive(bd, side, sign, other)
        bd.mul(f"in_self_{side}", "t_m11", f"accel_{side}", specs["m11"].frac_bits)
        bd.mul(f"in_other_{side}", "t_m12", f"accel_{other}", specs["m12"].frac_bits)
        bd.sum(f"total_{side}", (1, f"in_self_{side}"), (1, f"in_other_{side}"), (1, passive))
        bd.backdrive(
            f"motor_{side}", f"total_{side}", f"speed_{side}", v.drive.efficiency * v.drive.backdrive_efficiency
        )
        bd.store("current", idx, f"motor_{side}", guard)
    return prog


def _forward(
    v: Vehicle, specs: dict[str, tb.TableSpec], lim: Limits, *, guard: int, aguard: int, exact: bool
) -> Program:
    prog = Program(interface.FORWARD)
    bd = _Builder(prog, specs, specs["m11"].bits, exact=exact)
    _common(bd, lim, prog.call, "current")
    bd.lookup("t_minv11", "minv11", "payload")
    bd.lookup("t_minv12", "minv12", "payload")
    for side, sign, other in (("r", 1, "l"), ("l", -1, "r")):
        passive = _passive(bd, side, sign, other)
        bd.scale(f"cur_acc_{side}", f"cur_{side}", 1, -guard)
        bd.backdrive(
            f"effort_{side}",
            f"cur_acc_{side}",
            f"speed_{side}",
            1 / (v.drive.efficiency * v.drive.backdrive_efficiency),
        )
        bd.sum(f"net_{side}", (1, f"effort_{side}"), (-1, passive))
    for side, other, idx in (("r", "l", 0), ("l", "r", 1)):
        bd.mul(f"acc_self_{side}", "t_minv11", f"net_{side}", specs["minv11"].frac_bits - aguard)
        bd.mul(f"acc_other_{side}", "t_minv12", f"net_{other}", specs["minv12"].frac_bits - aguard)
        bd.sum(f"accel_{side}", (1, f"acc_self_{side}"), (1, f"acc_other_{side}"))
        bd.store("accel", idx, f"accel_{side}", aguard)
    return prog


def _guard_bits(peak_steps: float, top: int = 16) -> int:
    """Fraction bits below the output LSB that keep the accumulator within 2^29 (room for the sum)."""
    if peak_steps <= 0:
        return top
    return max(0, min(top, 29 - math.ceil(math.log2(peak_steps + 1))))


def _peak_current_steps(v: Vehicle, lim: Limits) -> float:
    """An upper bound of |accumulated motoring current| in current steps, from term maxima."""
    fw = v.firmware
    specs = _specs(v, lim, fw.current_lsb_a)
    mx = {n: s.max_abs for n, s in specs.items()}
    a, u = lim.accel, lim.speed
    return (
        (mx["m11"] + mx["m12"]) * a
        + mx["cor"] * 2 * u * u
        + mx["friction"]
        + mx["roll_level"]
        + mx["roll_slope"]
        + mx["grav_pitch"]
        + mx["grav_roll"]
    )


def design(v: Vehicle, *, exact: bool = False) -> Design:
    """Scales, table specs and both programs for a validated vehicle (sizes are chosen later).

    exact: products too wide for 32 bits keep every operand bit (an exact two-part product, else
    64 bits) instead of rounding their operands first; for budgets the rounded design cannot meet."""
    lim = limits_of(v)
    fw = v.firmware
    peak = _peak_current_steps(v, lim)
    guard = _guard_bits(peak)
    acc_amps = fw.current_lsb_a * 2.0**-guard
    specs = _specs(v, lim, acc_amps)
    accel_peak = (specs["minv11"].max_abs + specs["minv12"].max_abs) * (peak + lim.current) * 2.0**guard * 2
    aguard = _guard_bits(accel_peak, top=8)
    return Design(
        v,
        specs,
        _feedforward(v, specs, lim, guard=guard, exact=exact),
        _forward(v, specs, lim, guard=guard, aguard=aguard, exact=exact),
        lim,
        guard,
        aguard,
        acc_amps,
        exact,
    )
