"""The builder of the firmware programs: the feed-forward and forward dynamics as straight-line
integer programs over the tables (tablespecs.py), in the op vocabulary (ops.py). Python decides every
Q format, shift and constant here; the C follows the ops one statement each.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from . import bodyframe, interface
from . import fixedpoint as fx
from . import tables as tb
from .ops import (
    Backdrive,
    Clamp,
    Lookup,
    Mix,
    Mul,
    Op,
    PairClamp,
    Program,
    Scale,
    Store,
    Sum,
    fits32,
    looked_up,
    op_inputs,
    op_range,
    op_table,
    pre_shift,
    rounding_half,
    split_fits,
)
from .tablespecs import Limits, limits_of, specs_for
from .vehicle import Vehicle


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
    coarse: bool = False  # some table stores fewer fraction bits than its word allows (see _coarser)
    stribeck: bool = False  # the speed tables split at the Stribeck edge (see design)
    flat: bool = False  # the cosines folded into the payload tables (see design)


class _Builder:
    """Appends ops and keeps a conservative integer range per signal (for pre-shift decisions)."""

    def __init__(
        self, program: Program, specs: dict[str, tb.TableSpec], bits: int, *, exact: bool, vehicle: Vehicle
    ) -> None:
        self.p, self.specs, self.bits, self.exact, self.vehicle = program, specs, bits, exact, vehicle
        self.rng: dict[str, fx.Interval] = {}
        self.cor_shift = 0  # the Coriolis product's shift once its shared prefactor is made
        self.roll_level = ("r_level", 0)  # the rolling level as the wheels' products read it, and their shift

    def _add(self, op: Op) -> None:
        """Append an op and record its result's range by the one range rule (op_range)."""
        self.p.ops.append(op)
        self.rng[op.dst] = op_range(op, self.rng, self._estimate)

    def _estimate(self, op: Lookup | Backdrive) -> fx.Interval:
        """A table's range before it is sized: its largest value, one step of margin."""
        assert op.table is not None
        spec = self.specs[op.table]
        top = math.ceil(spec.max_abs * 2.0**spec.frac_bits) + 1
        return fx.Interval(-top, top)

    def clamp(self, dst: str, fieldname: str, index: int | None, *, lo: int, hi: int, bit: int) -> str:
        self._add(Clamp(dst=dst, field=fieldname, index=index, lo=lo, hi=hi, bit=bit))
        return dst

    def pair_clamp(self, op: PairClamp | Mix) -> str:
        self._add(op)
        return op.dst

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
        self._add(Mul(dst=dst, a=a, b=b, shift=shift))
        return dst

    def product(self, dst: str, a: str, b: str) -> tuple[str, int]:
        """a * b kept in 32 bits: when the exact product could not fit, the operands are rounded down
        first (one bit at a time from the larger); returns the product and the bits dropped in all."""
        ka = kb = 0
        while not fits32(self.rng[a].shift_round(ka) * self.rng[b].shift_round(kb), 0):
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
        self._add(Scale(dst=dst, a=a, k=k, shift=shift))
        return dst

    def sum(self, dst: str, *terms: tuple[int, str]) -> str:
        self._add(Sum(dst, tuple(terms)))
        return dst

    def backdrive(self, dst: str, src: str, speed: str, k_real: float, *, table: str | None = None) -> str:
        """With a blend table: its value at speed, in the table's format. Else k_real in fixed point: 14
        fraction bits with int16 tables; with int32, 30 in an exact design, else the most that keeps the
        product in 32 bits (directly or in two exact parts)."""
        if table is not None:
            bits = self.specs[table].frac_bits
            self._add(Backdrive(dst=dst, src=src, speed=speed, k=0, shift=bits, k_real=k_real, table=table))
            return dst
        top = 14 if self.bits == 16 else 30
        if k_real > 1:
            top -= math.ceil(math.log2(k_real))
        kbits = top
        while not (self.bits == 16 or self.exact) and kbits > 1 and not _k_fits(self.rng[src], k_real, kbits):
            kbits -= 1
        k = int(math.floor(k_real * 2.0**kbits + 0.5))
        self._add(Backdrive(dst=dst, src=src, speed=speed, k=k, shift=kbits, k_real=k_real))
        return dst

    def store(self, fieldname: str, index: int | None, src: str, shift: int) -> None:
        dst = fieldname if index is None else f"{fieldname}_{interface.SIDES[index]}"
        self._add(Store(dst=dst, field=fieldname, index=index, src=src, shift=shift))


def _k_fits(src: fx.Interval, k_real: float, kbits: int) -> bool:
    """Whether src * k (k_real with kbits fraction bits) fits 32 bits directly or split at kbits."""
    k = fx.Interval(*(2 * [int(math.floor(k_real * 2.0**kbits + 0.5))]))
    return fits32(src * k, kbits) or split_fits(src, k, kbits)


def _preshift(ra: fx.Interval, rb: fx.Interval, shift: int) -> tuple[int, int]:
    """Bits (pa, pb) to round a and b down by, pa + pb <= shift, so that the product fits 32 bits,
    choosing the pair that adds the least error (|b| 2^(pa-1) + |a| 2^(pb-1)); (0, 0) when the product
    fits as it is or no pair makes it fit (the proof then picks an exact two-part or 64-bit form)."""
    if fits32(ra * rb, shift):
        return 0, 0
    best: tuple[int, int, int] | None = None
    for pa in range(shift + 1):
        sa = ra.shift_round(pa)
        for pb in range(shift - pa + 1):
            if fits32(sa * rb.shift_round(pb), shift - pa - pb):
                cost = rb.magnitude() * rounding_half(pa) + ra.magnitude() * rounding_half(pb)
                if best is None or cost < best[0]:
                    best = (cost, pa, pb)
                break  # rounding b further only adds error
    return (best[1], best[2]) if best is not None else (0, 0)


def _clamps(bd: _Builder, lim: Limits, call: interface.Call, order: tuple[str, ...]) -> None:
    """Clamp every input member in `order`; bounds and flag bits come from the interface. A wheel pair
    whose region is not a box (body-frame limits) is clamped to the box, then into the region."""
    pairs = {"speed": lim.speed_pair, "accel": lim.accel_pair}
    for name in order:
        m = call.inputs.member(name)
        hi = getattr(lim, m.limit)
        lo = -hi if m.signed else 0
        pair = pairs.get(name) if m.count == 2 else None
        boxed = pair is not None and not pair.is_box
        for side, column in enumerate(m.columns):
            dst = f"{m.value}_{'box_' if boxed else ''}{'rl'[side]}" if m.count == 2 else m.value
            bd.clamp(dst, name, side if m.count == 2 else None, lo=lo, hi=hi, bit=call.clamp_bit(column))
        if pair is not None and boxed:
            for side, column in enumerate(m.columns):
                sig = m.value
                bd.pair_clamp(
                    PairClamp(
                        dst=f"{sig}_{'rl'[side]}",
                        right=f"{sig}_box_r",
                        left=f"{sig}_box_l",
                        side=side,
                        edge=hi,
                        sum_max=int(pair.sum_max),
                        diff_max=int(pair.diff_max),
                        bit=call.clamp_bit(column),
                    )
                )


def _body_inputs(bd: _Builder, lim: Limits, call: interface.Call) -> None:
    """Body-frame inputs: each clamped to its own edge, then each pair turned into wheel steps and each
    wheel clamped to its edge (bodyframe.py); a wheel clamp sets both of its pair's bits."""
    _clamps(bd, lim, call, (*interface.SLOW_MEMBERS, *(m.name for m in call.inputs.members if not m.slow)))
    for pair, (along, turn) in interface.BODY_PAIRS.items():
        mix = bodyframe.mix(bd.vehicle, pair)
        mask = (1 << call.clamp_bit(along.name)) | (1 << call.clamp_bit(turn.name))
        for side in (0, 1):
            bd.pair_clamp(
                Mix(
                    dst=f"{interface.FF_IN.member(pair).value}_{'rl'[side]}",
                    along=along.value,
                    turn=turn.value,
                    side=side,
                    k_along=mix.k_along,
                    k_turn=mix.k_turn,
                    shift=mix.shift,
                    wide=mix.wide,
                    edge=getattr(lim, pair),
                    mask=mask,
                )
            )


def _common(bd: _Builder, lim: Limits, call: interface.Call, pair: str) -> None:
    """All clamps first (the flags are then final and leave the registers), then the pitch/roll/payload
    lookups, gravity and the rolling-resistance level. `pair` is the other two-wheel input."""
    if call.inputs.body:
        _body_inputs(bd, lim, call)
    else:
        _clamps(bd, lim, call, (*interface.SLOW_MEMBERS, "speed", pair))  # speed next: the Coriolis product reads it
    s = bd.specs
    flat = "cos_pitch" not in s  # the cosines folded into the payload tables (tablespecs.specs_for)
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
        if name in s:
            bd.lookup(f"t_{name}", name, src)
    bd.mul("g_pitch", "t_grav_pitch", "t_sin_pitch", s["grav_pitch"].frac_bits + s["sin_pitch"].frac_bits)
    if flat:
        bd.mul("g_roll", "t_grav_roll", "t_sin_roll", s["grav_roll"].frac_bits + s["sin_roll"].frac_bits)
        bd.scale("r_up", "t_roll_level", 1, s["roll_level"].frac_bits)
    else:
        bd.mul("cos_sin", "t_cos_pitch", "t_sin_roll", s["cos_pitch"].frac_bits)
        bd.mul("g_roll", "t_grav_roll", "cos_sin", s["grav_roll"].frac_bits + s["sin_roll"].frac_bits)
        bd.mul("cos_cos", "t_cos_pitch", "t_cos_roll", s["cos_pitch"].frac_bits)
        bd.mul("r_up", "t_roll_level", "cos_cos", s["roll_level"].frac_bits + s["cos_roll"].frac_bits)
    bd.mul("r_down", "t_roll_slope", "t_sin_pitch", s["roll_slope"].frac_bits + s["sin_pitch"].frac_bits)
    bd.sum("r_level", (1, "r_up"), (-1, "r_down"))
    _rolling_level(bd)
    bd.sum("grav_r", (1, "g_pitch"), (1, "g_roll"))  # each wheel's gravity once, in the slow part
    bd.sum("grav_l", (1, "g_pitch"), (-1, "g_roll"))
    bd.sum("d_speed", (1, "speed_r"), (-1, "speed_l"))
    _, dropped = bd.product("cor_pre", "t_cor", "d_speed")  # shared by both wheels' Coriolis terms
    bd.cor_shift = s["cor"].frac_bits - dropped
    if "turn_level" in s:
        _turning(bd)


def _turning(bd: _Builder) -> None:
    """A skid-steer's turning resistance at the right wheel, T0 cos(pitch) cos(roll) s(u_R - u_L) in
    accumulator steps; the left wheel's is its negative."""
    s = bd.specs
    bd.lookup("t_turn_level", "turn_level", "payload")
    if "cos_cos" in bd.rng:
        bd.mul("turn_up", "t_turn_level", "cos_cos", s["turn_level"].frac_bits + s["cos_roll"].frac_bits)
    else:  # the cosines folded into turn_level
        bd.scale("turn_up", "t_turn_level", 1, s["turn_level"].frac_bits)
    bd.lookup("t_turn_shape", "turn_shape", "d_speed")
    bd.mul("turn", "turn_up", "t_turn_shape", s["turn_shape"].frac_bits)


def _turn_term(bd: _Builder, sign: int) -> tuple[tuple[int, str], ...]:
    """The turning term of a wheel's sum (none without one)."""
    return ((sign, "turn"),) if "turn" in bd.rng else ()


def _rolling_level(bd: _Builder) -> None:
    """The rolling level rounded down for its product with the shape, made once before the wheels: each
    wheel's product then follows its shape lookup directly, and where the shape needs no rounding of its
    own (int16 models) the C makes that product inside the lookup block (opview._fused_product)."""
    shift = bd.specs["shape"].frac_bits
    pa = 0
    if not bd.exact:
        pa, _ = _preshift(bd.rng["r_level"], bd._estimate(Lookup("t_shape", "shape", "speed_r")), shift)
    bd.roll_level = (bd._shifted("r_level", pa) if pa else "r_level", shift - pa)


def _speed_terms(bd: _Builder, side: str) -> tuple[str, str]:
    """Friction and rolling resistance at one wheel (the terms looked up by its speed), accumulator steps."""
    s = bd.specs
    u = f"speed_{side}"
    bd.lookup(f"t_fric_{side}", "friction", u)  # adjacent lookups of one input share abs and split in C
    bd.lookup(f"t_shape_{side}", "shape", u)
    bd.scale(f"fric_{side}", f"t_fric_{side}", 1, s["friction"].frac_bits)
    level, shift = bd.roll_level
    bd.mul(f"roll_{side}", level, f"t_shape_{side}", shift)
    return f"fric_{side}", f"roll_{side}"


def _passive(bd: _Builder, side: str, sign: int, other: str) -> str:
    """Coriolis + friction + rolling + gravity at one wheel, accumulator steps."""
    bd.mul(f"cor_{side}", "cor_pre", f"speed_{other}", bd.cor_shift)
    fric, roll = _speed_terms(bd, side)
    terms = ((sign, f"cor_{side}"), (1, fric), (1, roll), (1, f"grav_{side}"), *_turn_term(bd, sign))
    return bd.sum(f"passive_{side}", *terms)


def _feedforward(v: Vehicle, specs: dict[str, tb.TableSpec], lim: Limits, *, guard: int, exact: bool) -> Program:
    prog = Program(interface.feedforward(v))
    bd = _Builder(prog, specs, specs["m11"].bits, exact=exact, vehicle=v)
    _common(bd, lim, prog.call, "accel")
    bd.lookup("t_m11", "m11", "payload")
    bd.lookup("t_m12", "m12", "payload")
    sides = (("r", 1, "l", 0), ("l", -1, "r", 1))
    for side, sign, other, _ in sides:  # both wheels' speed-free terms first: fewer values stay live across the lookups
        bd.mul(f"cor_{side}", "cor_pre", f"speed_{other}", bd.cor_shift)
        bd.mul(f"in_self_{side}", "t_m11", f"accel_{side}", specs["m11"].frac_bits)
        bd.mul(f"in_other_{side}", "t_m12", f"accel_{other}", specs["m12"].frac_bits)
        bd.sum(
            f"base_{side}",
            (1, f"in_self_{side}"),
            (1, f"in_other_{side}"),
            (sign, f"cor_{side}"),
            (1, f"grav_{side}"),
            *_turn_term(bd, sign),
        )
    for side, _, _, idx in sides:
        fric, roll = _speed_terms(bd, side)
        bd.sum(f"total_{side}", (1, f"base_{side}"), (1, fric), (1, roll))
        bd.backdrive(
            f"motor_{side}",
            f"total_{side}",
            f"speed_{side}",
            v.drive.efficiency * v.drive.backdrive_efficiency,
            table="backdrive" if "backdrive" in specs else None,
        )
        bd.store("current", idx, f"motor_{side}", guard)
    return prog


def _forward(
    v: Vehicle, specs: dict[str, tb.TableSpec], lim: Limits, *, guard: int, aguard: int, exact: bool
) -> Program:
    prog = Program(interface.FORWARD)
    bd = _Builder(prog, specs, specs["m11"].bits, exact=exact, vehicle=v)
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
            table="backdrive_inv" if "backdrive_inv" in specs else None,
        )
        bd.sum(f"net_{side}", (1, f"effort_{side}"), (-1, passive))
    for side, other, idx in (("r", "l", 0), ("l", "r", 1)):
        bd.mul(f"acc_self_{side}", "t_minv11", f"net_{side}", specs["minv11"].frac_bits - aguard)
        bd.mul(f"acc_other_{side}", "t_minv12", f"net_{other}", specs["minv12"].frac_bits - aguard)
        bd.sum(f"accel_{side}", (1, f"acc_self_{side}"), (1, f"acc_other_{side}"))
        bd.store("accel", idx, f"accel_{side}", aguard)
    return prog


COARSER_ROUNDS = 3
"""Rebuilds at most: a coarser table changes its products' ranges, which can move another pre-shift."""


def _coarser(specs: dict[str, tb.TableSpec], programs: tuple[Program, Program]) -> dict[str, tb.TableSpec]:
    """The specs with each table's fraction bits lowered by the pre-shift every one of its lookups is
    read through (a Scale by 1 with shift > 0, in both programs): storing those bits only to round them
    away costs a shift per use (and, in int32 words, wide interpolation). Rounding the entries once at
    the coarser step is never worse than rounding them finely and then again (the proof counts both)."""
    ops = [op for prog in programs for op in prog.ops]
    drop: dict[str, int] = {}
    for op in ops:
        table = op_table(op)
        if table is None:
            continue
        readers = [r for r in ops if op.dst in op_inputs(r)]
        shifts = [pre_shift(r) for r in readers]
        usable = looked_up(op) is not None and readers and all(k > 0 for k in shifts)
        drop[table] = min(drop.get(table, 64), min(shifts) if usable else 0)
    return {
        n: replace(sp, frac_bits=sp.frac_bits - drop.get(n, 0)) if drop.get(n, 0) else sp for n, sp in specs.items()
    }


def _guard_bits(peak_steps: float, top: int = 16) -> int:
    """Fraction bits below the output LSB that keep the accumulator within 2^29 (room for the sum)."""
    if peak_steps <= 0:
        return top
    return max(0, min(top, 29 - math.ceil(math.log2(peak_steps + 1))))


def _peak_current_steps(v: Vehicle, lim: Limits) -> float:
    """An upper bound of |accumulated motoring current| in current steps, from term maxima."""
    fw = v.firmware
    specs = specs_for(v, lim, fw.current_lsb_a)
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
        + mx.get("turn_level", 0.0)
    )


def design(
    v: Vehicle, *, exact: bool = False, coarse: bool = True, stribeck: bool = False, flat: bool = False
) -> Design:
    """Scales, table specs and both programs for a validated vehicle (sizes are chosen later).

    exact: products too wide for 32 bits keep every operand bit (an exact two-part product, else
    64 bits) instead of rounding their operands first; for budgets the rounded design cannot meet.
    coarse (rounded designs): a table stores no fraction bits that every use of it rounds away first
    (_coarser); the programs are then built again on those tables.
    stribeck: the speed tables split where the Stribeck dip ends instead of at the deadband edge
    (tablespecs.friction_edge), so the outer friction piece can be one segment.
    flat: the cosines of pitch and roll are folded into the payload tables they multiply, held at their
    midranges over the envelope (tablespecs.flat_cosines), the most they stray counted in those tables'
    errors; two lookups and two products fewer in the slow part."""
    lim = limits_of(v)
    fw = v.firmware
    peak = _peak_current_steps(v, lim)
    guard = _guard_bits(peak)
    acc_amps = fw.current_lsb_a * 2.0**-guard
    specs = specs_for(v, lim, acc_amps, exact=exact, stribeck=stribeck, flat=flat)
    accel_peak = (specs["minv11"].max_abs + specs["minv12"].max_abs) * (peak + lim.current) * 2.0**guard * 2
    aguard = _guard_bits(accel_peak, top=8)
    ff = _feedforward(v, specs, lim, guard=guard, exact=exact)
    fwd = _forward(v, specs, lim, guard=guard, aguard=aguard, exact=exact)
    coarsened = False
    for _ in range(COARSER_ROUNDS if coarse and not exact and specs["m11"].bits == 32 else 0):
        coarser = _coarser(specs, (ff, fwd))
        if coarser == specs:
            break
        specs, coarsened = coarser, True
        ff = _feedforward(v, specs, lim, guard=guard, exact=exact)
        fwd = _forward(v, specs, lim, guard=guard, aguard=aguard, exact=exact)
    return Design(
        vehicle=v,
        specs=specs,
        feedforward=ff,
        forward=fwd,
        limits=lim,
        guard_bits=guard,
        accel_guard_bits=aguard,
        amps_per_acc=acc_amps,
        exact=exact,
        coarse=coarsened,
        stribeck=stribeck,
        flat=flat,
    )
