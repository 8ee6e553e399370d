"""Proofs over a sized program: integer ranges (no overflow, which products need 64 bits) and a
worst-case error bound of the integer result against the exact model, by interval arithmetic.

Error propagation per op: see _error_step, the one place that states it.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any, assert_never

import numpy as np

from . import fixedpoint as fx
from . import tables as tb
from .errors import CheckFailed
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
    op_range,
    op_table,
    rounding_half,
    split_fits,
)


@dataclass(frozen=True)
class Proof:
    """Proven value range of every signal, and which products must be computed in 64 bits."""

    ranges: dict[str, fx.Interval]
    wide: dict[str, bool]  # Mul / Backdrive dst -> product does not fit 32 bits as it is
    split: dict[str, str]  # Mul / Backdrive dst -> operand split for an exact 32-bit two-part product ("a", "b", "")
    lookup_wide: dict[str, tuple[bool, ...]]  # table -> per piece: interpolation product does not fit 32 bits
    lookup_split: dict[str, tuple[bool, ...]]  # table -> per piece: ... but fits in two exact 32-bit parts
    outputs: dict[tuple[str, int], fx.Interval]

    def products64(self, program: Program) -> list[str]:
        """The program's products that need a 64-bit multiply (no exact 32-bit form): signal names, and
        `lookup <table>` for an interpolation."""
        names = [name for name, w in self.wide.items() if w and not self.split[name]]
        tables = {table for op in program.ops if (table := op_table(op)) is not None}
        for table in sorted(tables):
            if any(w and not sp for w, sp in zip(self.lookup_wide[table], self.lookup_split[table])):
                names.append(f"lookup {table}")
        return names


def _fail(program: Program, what: str, interval: fx.Interval) -> CheckFailed:
    return CheckFailed(
        f"{program.name}: {what} can reach [{interval.lo}, {interval.hi}], outside int32: "
        "the model's values cannot fit this firmware format"
    )


def _table_range(table: tb.Table) -> fx.Interval:
    lo = min(int(p.entries.min()) for p in table.pieces)
    hi = max(int(p.entries.max()) for p in table.pieces)
    r = fx.Interval(lo, hi)
    return r.hull(-r) if table.spec.symmetry == "odd" else r


def _interp_step(piece: tb.PieceData) -> int:
    """Largest difference of neighbouring entries: what the interpolation multiplies (0: none)."""
    match piece.kind:
        case tb.PieceKind.CONSTANT | tb.PieceKind.DIRECT:
            return 0
        case tb.PieceKind.ONE_SEGMENT | tb.PieceKind.INDEXED:
            return int(np.max(np.abs(np.diff(piece.entries))))
        case _:
            assert_never(piece.kind)


def _interp_wide(piece: tb.PieceData) -> bool:
    """The interpolation product (e1 - e0) * f + half can leave 32 bits (never for a piece without one)."""
    step = _interp_step(piece)
    return step > 0 and (step > fx.word_max(32) or step * piece.mask + (1 << (piece.shift - 1)) > fx.word_max(32))


def _interp_split(piece: tb.PieceData) -> bool:
    """A wide interpolation (e1 - e0) * f / 2^s computed exactly in two 32-bit parts (f < 2^s)."""
    if not _interp_wide(piece):
        return False
    step = _interp_step(piece)
    return step <= fx.word_max(32) and split_fits(fx.Interval(-step, step), fx.Interval(0, piece.mask), piece.shift)


def folded_segment(piece: tb.PieceData) -> tuple[int, int] | None:
    """A one-segment piece as one multiply-add: e0 + (((e1 - e0) d + h) >> s) = ((e1 - e0) d + C) >> s
    with C = e0 2^s + h (e0 2^s is a multiple of 2^s, so the floor is unchanged); (e1 - e0, C) when
    every value of the folded sum fits 32 bits for d in 0 .. 2^s - 1, else None."""
    if piece.kind is not tb.PieceKind.ONE_SEGMENT:
        return None
    e0, step = int(piece.entries[0]), int(piece.entries[1]) - int(piece.entries[0])
    const = (e0 << piece.shift) + rounding_half(piece.shift)
    total = fx.Interval(0, piece.mask) * fx.Interval(step, step) + fx.Interval(const, const)
    return (step, const) if total.fits(32) else None


def prove(program: Program, tables: Mapping[str, tb.Table]) -> Proof:
    """Walk the ops with integer intervals; raise CheckFailed naming the signal that would overflow."""
    rng: dict[str, fx.Interval] = {}
    wide: dict[str, bool] = {}
    split: dict[str, str] = {}
    outputs: dict[tuple[str, int], fx.Interval] = {}
    table_range = lambda op: _table_range(tables[op.table])  # noqa: E731
    for op in program.ops:
        _check_op(program, op, rng, wide=wide, split=split, table_range=table_range)
        result = op_range(op, rng, table_range)
        if not result.fits(32):
            raise _fail(program, f"signal {op.dst}", result)
        rng[op.dst] = result
    for m in program.call.outputs.members:
        outputs.update({(m.name, k): rng.pop(column) for k, column in enumerate(m.columns)})
    lookup_wide = {name: tuple(_interp_wide(p) for p in t.pieces) for name, t in tables.items()}
    lookup_split = {name: tuple(_interp_split(p) for p in t.pieces) for name, t in tables.items()}
    return Proof(
        ranges=rng, wide=wide, split=split, lookup_wide=lookup_wide, lookup_split=lookup_split, outputs=outputs
    )


def _with_half(prod: fx.Interval, shift: int) -> fx.Interval:
    """A product plus the rounding half added before the shift: what the C must hold."""
    return fx.Interval(prod.lo, prod.hi + rounding_half(shift))


def _check_op(
    program: Program,
    op: Op,
    rng: dict[str, fx.Interval],
    *,
    wide: dict[str, bool],
    split: dict[str, str],
    table_range: Callable[[Any], fx.Interval],
) -> None:
    """What each op needs beyond its result range: which products need 64 bits, which partial sums and
    roundings would overflow (CheckFailed)."""
    match op:
        case Clamp() | Lookup():
            pass
        case PairClamp():
            both = fx.Interval(-2 * op.edge, 2 * op.edge)  # r + l and r - l of two box-clamped wheels
            if not both.fits(32):
                raise _fail(program, f"the sum of the pair {op.right}, {op.left}", both)
        case Mix():
            along = rng[op.along] * fx.Interval(op.k_along, op.k_along)
            turn = rng[op.turn] * fx.Interval(op.k_turn, op.k_turn)
            total = _with_half(along + turn.hull(-turn), op.shift)  # the C clamps a wide one in 64 bits
            if not total.fits(64) or (not op.wide and not total.fits(32)):
                raise _fail(program, f"the body-frame sum of {op.dst}", total)
            wide[op.dst], split[op.dst] = op.wide, ""
        case Mul():
            _check_product(program, op.dst, ra=rng[op.a], rb=rng[op.b], shift=op.shift, wide=wide, split=split)
        case Scale():
            _check_product(
                program, op.dst, ra=rng[op.a], rb=fx.Interval(op.k, op.k), shift=op.shift, wide=wide, split=split
            )
        case Sum():
            total = fx.Interval(0, 0)
            for sign, name in op.terms:
                total = total + (rng[name] if sign > 0 else -rng[name])
                if not total.fits(32):
                    raise _fail(program, f"partial sum of {op.dst}", total)
        case Backdrive():
            k = table_range(op) if op.table is not None else fx.Interval(op.k, op.k)
            wide[op.dst] = not _with_half(rng[op.src] * k, op.shift).fits(32)
            split[op.dst] = "a" if wide[op.dst] and split_fits(rng[op.src], k, op.shift) else ""
        case Store():
            with_half = _with_half(rng[op.src], op.shift)
            if not with_half.fits(32):
                raise _fail(program, f"rounding of {op.field}[{op.index}]", with_half)
        case _:
            assert_never(op)


def _check_product(
    program: Program,
    dst: str,
    *,
    ra: fx.Interval,
    rb: fx.Interval,
    shift: int,
    wide: dict[str, bool],
    split: dict[str, str],
) -> None:
    """A product must fit 64 bits with its rounding half; record whether it needs them, and which
    operand to split for an exact two-part 32-bit form."""
    with_half = _with_half(ra * rb, shift)
    if not with_half.fits(64):
        raise _fail(program, f"product {dst}", with_half)
    wide[dst] = not with_half.fits(32)
    split[dst] = _split_operand(ra, rb, shift) if wide[dst] else ""


def _split_operand(ra: fx.Interval, rb: fx.Interval, shift: int) -> str:
    """Which operand of a too-wide product to split for the exact two-part form ("" when neither)."""
    if split_fits(ra, rb, shift):
        return "a"
    return "b" if split_fits(rb, ra, shift) else ""


TableErrors = Mapping[str, Any]
"""Per table, its worst error in target units: a float, or a numpy array of candidates (broadcast)."""
Step = Callable[[dict[str, Any], TableErrors], Any]


def _error_step(op: Op, specs: Mapping[str, tb.TableSpec], mag: dict[str, float], zero: set[str]) -> Step | None:
    """One op's error propagation (integer units of each signal; A, B ideal values, e their errors):
      a*b/2^s: (|A| e_b + |B| e_a + e_a e_b) / 2^s + 1/2 when s > 0;  sum: the sum of the errors;
      lookup: the table's worst error;  backdrive: e*max(1, k) + |k_int - k|(|A| + e) + 1/2, or with a
      factor table T (error e_T): (|A| + e) e_T + e*max|T| + 1/2;
      store: e/2^s + 1/2 when s > 0.
    Records the result's magnitude in `mag`; signals known to be exact go in `zero`: they get no step
    (ErrorBound starts them at 0.0) and sums leave them out, which makes the bound fast enough for sizing."""
    match op:
        case Clamp() | PairClamp() | Mix():  # exact: the model is evaluated at the clamped input (or pair)
            # a Mix's distance from the exact wheel value is an input resolution (bodyframe.Conversion.deviation)
            mag[op.dst] = float(op_range(op, {}, lambda _: fx.Interval(0, 0)).magnitude())
            zero.add(op.dst)
            return None
        case Lookup():
            scale = 2.0 ** specs[op.table].frac_bits
            mag[op.dst] = specs[op.table].max_abs * scale
            return lambda err, E: E[op.table] * scale  # a float, or an array of candidates
        case Mul():
            ma, mb, b = mag[op.a], mag[op.b], op.b
            scale, half = 2.0**-op.shift, 0.5 if op.shift > 0 else 0.0
            mag[op.dst] = ma * mb * scale
            if op.a in zero and b in zero and half == 0:
                zero.add(op.dst)
                return None
            a = op.a
            return lambda err, E: (ma * err[b] + mb * err[a] + err[a] * err[b]) * scale + half
        case Scale():
            mk = float(abs(op.k))
            scale, half = 2.0**-op.shift, 0.5 if op.shift > 0 else 0.0
            mag[op.dst] = mag[op.a] * mk * scale
            if op.a in zero and half == 0:
                zero.add(op.dst)
                return None
            return lambda err, E: (mk * err[op.a]) * scale + half
        case Sum():
            mag[op.dst] = sum(mag[n] for _, n in op.terms)
            live = [n for _, n in op.terms if n not in zero]
            if not live:
                zero.add(op.dst)
                return None
            return _sum_step(live)
        case Backdrive():
            return _backdrive_step(op, specs, mag)
        case Store():
            scale, half = 2.0**-op.shift, 0.5 if op.shift > 0 else 0.0
            mag[op.dst] = mag[op.src] * scale
            return lambda err, E: err[op.src] * scale + half
        case _:
            assert_never(op)


def _backdrive_step(op: Backdrive, specs: Mapping[str, tb.TableSpec], mag: dict[str, float]) -> Step:
    """A constant factor k (its fixed-point value k_int): e*max(1, k) + |k_int - k|(|A| + e) + 1/2; a factor
    table T (worst error e_T): (|A| + e) e_T + e*max|T| + 1/2 (the product's terms, as for a Mul)."""
    ms = mag[op.src]
    if op.table is not None:
        gain, table = max(1.0, specs[op.table].max_abs), op.table
        mag[op.dst] = ms * gain
        return lambda err, E: (ms + err[op.src]) * E[table] + err[op.src] * gain + 0.5
    gain, dk = max(1.0, op.k_real), abs(op.k * 2.0**-op.shift - op.k_real)
    mag[op.dst] = ms * gain
    return lambda err, E: err[op.src] * gain + dk * (ms + err[op.src]) + 0.5


def _sum_step(live: list[str]) -> Step:
    """The errors of a sum's inexact terms, added left to right."""

    def step(err: dict[str, Any], _tables: TableErrors) -> Any:
        total = err[live[0]]
        for name in live[1:]:
            total = total + err[name]
        return total

    return step


@dataclass(frozen=True)
class ErrorBound:
    """The error bound of one program as a callable: table errors -> worst output error in steps."""

    steps: tuple[tuple[str, Step], ...]  # the signal each step writes, and the step
    outputs: tuple[str, ...]  # the output columns, which the program's stores write
    exact: tuple[str, ...] = ()  # the signals known to be exact: no step, error 0.0

    def __call__(self, table_error: TableErrors) -> Any:
        err: dict[str, Any] = dict.fromkeys(self.exact, 0.0)
        for dst, step in self.steps:
            err[dst] = step(err, table_error)
        worst: Any = 0.0
        for column in self.outputs:
            if column in err:  # a program may store only some outputs (tests build such)
                worst = np.maximum(worst, err[column])  # floats stay floats until here (fast in sizing)
        return worst


def compile_bound(program: Program, specs: Mapping[str, tb.TableSpec]) -> ErrorBound:
    """The program's error propagation with every magnitude folded in once (sizing calls it often)."""
    mag: dict[str, float] = {}
    zero: set[str] = set()
    steps = []
    for op in program.ops:
        step = _error_step(op, specs, mag, zero)
        if step is not None:
            steps.append((op.dst, step))
    if len({op.dst for op in program.ops}) != len(program.ops):
        raise ValueError("a program's ops must each write a signal of their own")  # an exact one stays 0.0
    return ErrorBound(tuple(steps), program.call.outputs.columns, tuple(sorted(zero)))


def error_bound(program: Program, specs: Mapping[str, tb.TableSpec], table_error: TableErrors) -> Any:
    """Worst |integer output - exact model| in output steps (max over outputs); arrays broadcast."""
    return compile_bound(program, specs)(table_error)


def table_errors(tables: Mapping[str, tb.Table], errors: Mapping[str, tuple[tb.PieceError, ...]]) -> dict[str, float]:
    """A table's worst error is the worst of its pieces."""
    return {name: max(e.total for e in errors[name]) for name in tables}
