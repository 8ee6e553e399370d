"""The op vocabulary of the firmware programs: each op kind, what it reads, the range of its result,
and the division of a program by rate (its slow and fast parts). The builder (program.py) emits ops; the
emulator interprets them, the analysis proves them, and the templates print one C statement per op.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import assert_never

from . import fixedpoint as fx
from . import interface

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


@dataclass(frozen=True, kw_only=True)
class PairClamp:
    """dst = wheel `side` (0 right, 1 left) of the pair (right, left), both already box-clamped to
    +-edge, moved into the region |r + l| <= sum_max, |r - l| <= diff_max by region.clamp; flags |= bit
    when that wheel moved. sum_max and diff_max are even."""

    dst: str
    right: str
    left: str
    side: int
    edge: int
    sum_max: int
    diff_max: int
    bit: int


@dataclass(frozen=True, kw_only=True)
class Mix:
    """dst = wheel `side` (0 right, 1 left) of a body-frame pair (bodyframe.py): round((along k_along
    +- turn k_turn) / 2^shift), + for the right wheel, then clamped to +-edge; flags |= mask (both of the
    pair's bits) when the clamp moved it. `wide`: the products and their sum need 64 bits."""

    dst: str
    along: str
    turn: str
    side: int
    k_along: int
    k_turn: int
    shift: int
    wide: bool
    edge: int
    mask: int


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
    """dst = src when src and speed do not oppose, else round(src * k / 2^shift): k the constant, or with a
    `table` the table's value at speed (the blended factor, in the table's Q format: shift = its fraction
    bits), looked up only on that branch."""

    dst: str
    src: str
    speed: str
    k: int
    shift: int
    k_real: float  # the factor beyond any blend band
    table: str | None = None


@dataclass(frozen=True)
class Store:
    """out.field[index] = round(src / 2^shift) (out.field for a scalar, index None); `dst` is that output's
    column name (`current_right`, `current`)."""

    dst: str
    field: str
    index: int | None
    src: str
    shift: int


Op = Clamp | PairClamp | Mix | Lookup | Mul | Scale | Sum | Backdrive | Store
"""Every op kind. A new kind is added here, then wherever `assert_never` fails the type check:
op_range (below), emulate.run, analysis.prove, analysis._error_step, opview._op_view, ff/ops.j2."""


def op_inputs(op: Op) -> tuple[str, ...]:
    """The signals an op reads (a Clamp reads an input field, not a signal)."""
    match op:
        case Clamp():
            return ()
        case PairClamp():
            return (op.right, op.left)
        case Mix():
            return (op.along, op.turn)
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


SLOW_FIELDS = interface.SLOW_MEMBERS
"""Inputs that change slowly (the interface's `slow` members)."""


@dataclass(frozen=True)
class Rates:
    """A program in two rates: the ops that depend only on the slow inputs, the rest, and the slow
    signals the fast ops read (the state the slow part hands over, in program order)."""

    slow: tuple[Op, ...]
    fast: tuple[Op, ...]
    state: tuple[str, ...]


def by_rate(program: Program) -> Rates:
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
    return Rates(slow=tuple(slow), fast=tuple(fast), state=state)


def _is_slow(op: Op, slow_names: set[str]) -> bool:
    """A clamp of a slow input, or an op reading only slow signals; outputs are written at the fast rate."""
    match op:
        case Clamp():
            return op.field in SLOW_FIELDS
        case Store():
            return False
        case PairClamp() | Mix() | Lookup() | Mul() | Scale() | Sum() | Backdrive():
            return all(name in slow_names for name in op_inputs(op))
        case _:
            assert_never(op)


def op_table(op: Op) -> str | None:
    """The table an op looks up, if any."""
    match op:
        case Lookup():
            return op.table
        case Backdrive():
            return op.table
        case Clamp() | PairClamp() | Mix() | Mul() | Scale() | Sum() | Store():
            return None
        case _:
            assert_never(op)


def signal_product(op: Op) -> Mul | None:
    """The op when it is a product of two signals (a Mul), else None."""
    match op:
        case Mul():
            return op
        case Clamp() | PairClamp() | Mix() | Lookup() | Scale() | Sum() | Backdrive() | Store():
            return None
        case _:
            assert_never(op)


def looked_up(op: Op) -> str | None:
    """The table a Lookup reads (a Backdrive's table is read only on its branch: None here)."""
    match op:
        case Lookup():
            return op.table
        case Clamp() | PairClamp() | Mix() | Mul() | Scale() | Sum() | Backdrive() | Store():
            return None
        case _:
            assert_never(op)


def moves_pairs(op: Op) -> bool:
    """Whether the op moves a wheel pair into a region (a PairClamp: the C then needs its scaling helper)."""
    match op:
        case PairClamp():
            return True
        case Clamp() | Mix() | Lookup() | Mul() | Scale() | Sum() | Backdrive() | Store():
            return False
        case _:
            assert_never(op)


def pre_shift(op: Op) -> int:
    """The bits an op rounds its one operand down by when it is a plain rounding shift (a Scale by 1 with
    shift > 0), else 0."""
    match op:
        case Scale():
            return op.shift if op.k == 1 and op.shift > 0 else 0
        case Clamp() | PairClamp() | Mix() | Lookup() | Mul() | Sum() | Backdrive() | Store():
            return 0
        case _:
            assert_never(op)


def wide_conversion(op: Op) -> bool:
    """Whether the op is a body-frame conversion whose products need 64 bits."""
    match op:
        case Mix():
            return op.wide
        case Clamp() | PairClamp() | Lookup() | Mul() | Scale() | Sum() | Backdrive() | Store():
            return False
        case _:
            assert_never(op)


def rounding_half(shift: int) -> int:
    """What "add half, then shift right" adds: 2^(shift-1) for shift > 0, else nothing."""
    return (1 << (shift - 1)) if shift > 0 else 0


def op_range(op: Op, rng: dict[str, fx.Interval], lookup: Callable[[Lookup | Backdrive], fx.Interval]) -> fx.Interval:
    """The value range an op's result can take, from the ranges of its operands. `lookup` gives a
    table's range: estimated while building, exact once the tables are sized."""
    match op:
        case Clamp():
            return fx.Interval(op.lo, op.hi)
        case PairClamp() | Mix():
            return fx.Interval(-op.edge, op.edge)
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
            factor = lookup(op) if op.table is not None else fx.Interval(op.k, op.k)
            return r.hull((r * factor).shift_round(op.shift))
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


def fits32(prod: fx.Interval, shift: int) -> bool:
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
    return high.fits(32) and fits32(low, shift)
