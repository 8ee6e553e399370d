"""Proofs over a sized program: integer ranges (no overflow, which products need 64 bits) and a
worst-case error bound of the integer result against the exact model, by interval arithmetic.

Error propagation per op (integer units of each signal; A, B ideal values, e their errors):
  a*b/2^s: (|A| e_b + |B| e_a + e_a e_b) / 2^s + 1/2 (rounding, when s > 0)
  sum: the sum of errors;  lookup: the table's measured worst error;  store: e/2^s + 1/2.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

import numpy as np

from . import fixedpoint as fx
from . import tables as tb
from .errors import CheckFailed
from .program import Backdrive, Clamp, Lookup, Mul, Program, Store, Sum

I32 = fx.Interval(fx.word_min(32), fx.word_max(32))
I64 = fx.Interval(fx.word_min(64), fx.word_max(64))


@dataclass(frozen=True)
class Proof:
    """Proven value range of every signal, and which products must be computed in 64 bits."""

    ranges: dict[str, fx.Interval]
    wide: dict[str, bool]                 # Mul / Backdrive dst -> product needs int64
    split: dict[str, bool]                # Backdrive dst -> exact 32-bit two-part product instead
    lookup_wide: dict[str, tuple[bool, ...]]  # table -> per piece: interpolation product needs int64
    outputs: dict[tuple[str, int], fx.Interval]


def _fail(program: Program, what: str, interval: fx.Interval) -> CheckFailed:
    return CheckFailed(f"{program.name}: {what} can reach [{interval.lo}, {interval.hi}], outside int32: "
                       "the model's values cannot fit this firmware format")


def _table_range(table: tb.Table) -> fx.Interval:
    lo = min(int(p.entries.min()) for p in table.pieces)
    hi = max(int(p.entries.max()) for p in table.pieces)
    r = fx.Interval(lo, hi)
    return r.hull(-r) if table.spec.symmetry == "odd" else r


def _interp_wide(piece: tb.PieceData) -> bool:
    if piece.segments == 0 or piece.shift == 0:
        return False
    step = int(np.max(np.abs(np.diff(piece.entries))))
    return step > fx.word_max(32) or step * piece.mask + (1 << (piece.shift - 1)) > fx.word_max(32)


def prove(program: Program, tables: Mapping[str, tb.Table]) -> Proof:
    """Walk the ops with integer intervals; raise CheckFailed naming the signal that would overflow."""
    rng: dict[str, fx.Interval] = {}
    wide: dict[str, bool] = {}
    split: dict[str, bool] = {}
    outputs: dict[tuple[str, int], fx.Interval] = {}
    for op in program.ops:
        if isinstance(op, Clamp):
            rng[op.dst] = fx.Interval(op.lo, op.hi)
        elif isinstance(op, Lookup):
            rng[op.dst] = _table_range(tables[op.table])
        elif isinstance(op, Mul):
            rb = rng[op.b] if isinstance(op.b, str) else fx.Interval(op.b, op.b)
            prod = rng[op.a] * rb
            half = (1 << (op.shift - 1)) if op.shift > 0 else 0
            with_half = fx.Interval(prod.lo, prod.hi + half)
            if not with_half.fits(64):
                raise _fail(program, f"product {op.dst}", with_half)
            wide[op.dst] = not with_half.fits(32)
            rng[op.dst] = prod.shift_round(op.shift)
        elif isinstance(op, Sum):
            total = fx.Interval(0, 0)
            for sign, name in op.terms:
                total = total + (rng[name] if sign > 0 else -rng[name])
                if not total.fits(32):
                    raise _fail(program, f"partial sum of {op.dst}", total)
            rng[op.dst] = total
        elif isinstance(op, Backdrive):
            prod = rng[op.src] * fx.Interval(op.k, op.k)
            with_half = fx.Interval(prod.lo, prod.hi + (1 << (op.shift - 1)))
            wide[op.dst] = not with_half.fits(32)
            split[op.dst] = wide[op.dst] and _split_fits(rng[op.src], op.k, op.shift)
            rng[op.dst] = rng[op.src].hull(prod.shift_round(op.shift))
        elif isinstance(op, Store):
            with_half = fx.Interval(rng[op.src].lo, rng[op.src].hi + ((1 << (op.shift - 1)) if op.shift > 0 else 0))
            if not with_half.fits(32):
                raise _fail(program, f"rounding of {op.field}[{op.index}]", with_half)
            outputs[(op.field, op.index)] = rng[op.src].shift_round(op.shift)
            continue
        if not rng[op.dst].fits(32):
            raise _fail(program, f"signal {op.dst}", rng[op.dst])
    lookup_wide = {name: tuple(_interp_wide(p) for p in t.pieces) for name, t in tables.items()}
    return Proof(rng, wide, split, lookup_wide, outputs)


def _split_fits(src: fx.Interval, k: int, shift: int) -> bool:
    """(x >> s) * k + (((x & (2^s - 1)) * k + half) >> s) equals round(x * k / 2^s) exactly; usable when
    both partial products fit 32 bits (saves a 64-bit multiply, a library call on Cortex-M0+)."""
    high = fx.Interval(src.lo >> shift, src.hi >> shift) * fx.Interval(k, k)
    low = ((1 << shift) - 1) * abs(k) + (1 << (shift - 1))
    return high.fits(32) and low <= fx.word_max(32) and k >= 0


def error_bound(program: Program, specs: Mapping[str, tb.TableSpec], table_error: Mapping[str, object],
                parts: bool = False):
    """Worst |integer output - exact model| in output steps (max over outputs); arrays broadcast.

    table_error: per table, its worst error in target units (a float or a numpy array of candidates).
    With parts=True also returns the rounding-only bound (all table errors zero).
    """
    mag: dict[str, float] = {}
    err: dict[str, object] = {}
    worst: object = 0.0
    for op in program.ops:
        if isinstance(op, Clamp):
            mag[op.dst], err[op.dst] = float(max(abs(op.lo), abs(op.hi))), 0.0
        elif isinstance(op, Lookup):
            spec = specs[op.table]
            scale = 2.0**spec.frac_bits
            mag[op.dst], err[op.dst] = spec.max_abs * scale, np.asarray(table_error[op.table]) * scale
        elif isinstance(op, Mul):
            ma, ea = mag[op.a], err[op.a]
            mb, eb = (mag[op.b], err[op.b]) if isinstance(op.b, str) else (float(abs(op.b)), 0.0)
            scale = 2.0**-op.shift
            mag[op.dst] = ma * mb * scale
            err[op.dst] = (ma * eb + mb * ea + ea * eb) * scale + (0.5 if op.shift > 0 else 0.0)
        elif isinstance(op, Sum):
            mag[op.dst] = sum(mag[n] for _, n in op.terms)
            err[op.dst] = sum(err[n] for _, n in op.terms)
        elif isinstance(op, Backdrive):
            gain = max(1.0, op.k_exact)
            dk = abs(op.k * 2.0**-op.shift - op.k_exact)
            mag[op.dst] = mag[op.src] * gain
            err[op.dst] = err[op.src] * gain + dk * (mag[op.src] + err[op.src]) + 0.5
        elif isinstance(op, Store):
            worst = np.maximum(worst, err[op.src] * 2.0**-op.shift + (0.5 if op.shift > 0 else 0.0))
    return worst


def table_errors(tables: Mapping[str, tb.Table], errors: Mapping[str, tuple[tb.PieceError, ...]]) -> dict[str, float]:
    """A table's worst error is the worst of its pieces."""
    return {name: max(e.total for e in errors[name]) for name in tables}


def compile_bound(program: Program, specs: Mapping[str, tb.TableSpec]):
    """error_bound as generated Python: the same propagation, constants folded (sizing calls it often).

    Returns f(table_error) with the same meaning and result as error_bound(program, specs, table_error).
    """
    mag: dict[str, float] = {}
    zero: set[str] = set()
    lines = ["def bound(E):", "    worst = 0.0"]
    var = lambda name: "e_" + name  # noqa: E731
    for op in program.ops:
        if isinstance(op, Clamp):
            mag[op.dst] = float(max(abs(op.lo), abs(op.hi)))
            zero.add(op.dst)
        elif isinstance(op, Lookup):
            spec = specs[op.table]
            mag[op.dst] = spec.max_abs * 2.0**spec.frac_bits
            lines.append(f"    {var(op.dst)} = E[{op.table!r}] * {2.0**spec.frac_bits!r}")
        elif isinstance(op, Mul):
            ma = mag[op.a]
            mb = mag[op.b] if isinstance(op.b, str) else float(abs(op.b))
            za, zb = op.a in zero, (not isinstance(op.b, str)) or op.b in zero
            terms = []
            if not zb:
                terms.append(f"{ma!r} * {var(op.b)}")
            if not za:
                terms.append(f"{mb!r} * {var(op.a)}")
            if not za and not zb:
                terms.append(f"{var(op.a)} * {var(op.b)}")
            mag[op.dst] = ma * mb * 2.0**-op.shift
            half = 0.5 if op.shift > 0 else 0.0
            if not terms and half == 0:
                zero.add(op.dst)
                continue
            body = f"({' + '.join(terms)}) * {2.0**-op.shift!r}" if terms else "0.0"
            lines.append(f"    {var(op.dst)} = {body} + {half!r}")
        elif isinstance(op, Sum):
            mag[op.dst] = sum(mag[n] for _, n in op.terms)
            live = [var(n) for _, n in op.terms if n not in zero]
            if not live:
                zero.add(op.dst)
                continue
            lines.append(f"    {var(op.dst)} = {' + '.join(live)}")
        elif isinstance(op, Backdrive):
            gain = max(1.0, op.k_exact)
            dk = abs(op.k * 2.0**-op.shift - op.k_exact)
            src = "0.0" if op.src in zero else var(op.src)
            lines.append(f"    {var(op.dst)} = {src} * {gain!r} + {dk!r} * ({mag[op.src]!r} + {src}) + 0.5")
            mag[op.dst] = mag[op.src] * gain
        elif isinstance(op, Store):
            src = "0.0" if op.src in zero else var(op.src)
            half = 0.5 if op.shift > 0 else 0.0
            lines.append(f"    worst = _max(worst, {src} * {2.0**-op.shift!r} + {half!r})")
    lines.append("    return worst")
    scope: dict[str, object] = {"_max": np.maximum}
    exec(compile("\n".join(lines), f"<bound of {program.name}>", "exec"), scope)  # noqa: S102
    return scope["bound"]
