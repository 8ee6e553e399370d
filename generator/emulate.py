"""Interpreter of the firmware programs: bit-exact integers (the C's specification) or real modes.

Integer mode uses numpy int64 and checks after every op that the value fits the 32-bit signal the C
stores it in, so a wrap would be an error here rather than a silent difference.
Real modes drop rounding for the error breakdown: "model" evaluates the functions themselves (and must
equal the float model, but for cosines a folded design holds at their midranges), "interp" interpolates
unrounded breakpoints, "quant" the stored entries.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import assert_never

import numpy as np

from . import fixedpoint as fx
from . import region
from . import tables as tb
from .ops import Backdrive, Clamp, Lookup, Mix, Mul, Op, PairClamp, Program, Scale, Store, Sum, by_rate, rounding_half

INT32 = (fx.word_min(32), fx.word_max(32))


class WrapError(AssertionError):
    """An intermediate left its 32-bit signal: the analysis that should have prevented it is wrong."""


def _check32(name: str, x: np.ndarray) -> None:
    if x.size and (x.min() < INT32[0] or x.max() > INT32[1]):
        raise WrapError(f"signal {name} leaves int32: [{x.min()}, {x.max()}]")


def _input(inputs: Mapping[str, np.ndarray], op: Clamp) -> np.ndarray:
    raw = np.asarray(inputs[op.field], dtype=np.int64)
    return raw[..., op.index] if op.index is not None else raw


def _step(
    op: Op, env: dict[str, np.ndarray], tables: Mapping[str, tb.Table], inputs: Mapping[str, np.ndarray], *, mode: str
) -> np.ndarray:
    """One op's result: integers exactly as the C computes them (mode "int"), or real values."""
    integer = mode == "int"
    match op:
        case Clamp():
            val = np.clip(_input(inputs, op), op.lo, op.hi)
            return val if integer else val.astype(float)
        case PairClamp():
            return _pair(op, env).astype(np.int64 if integer else float)
        case Mix():
            return np.clip(_mixed(op, env), -op.edge, op.edge).astype(np.int64 if integer else float)
        case Lookup():
            src = np.asarray(env[op.src], dtype=np.int64)
            table = tables[op.table]
            return np.asarray(tb.lookup(table, src) if integer else tb.lookup_real(table, src, mode))
        case Mul():
            a, b = env[op.a], env[op.b]
            return np.asarray(fx.shift_round(a * b, op.shift) if integer else a * b * 2.0**-op.shift)
        case Scale():
            a = env[op.a]
            return np.asarray(fx.shift_round(a * op.k, op.shift) if integer else a * op.k * 2.0**-op.shift)
        case Sum():
            (sign0, first), rest = op.terms[0], op.terms[1:]
            total = sign0 * env[first]
            for sign, name in rest:
                total = total + sign * env[name]
            return total
        case Backdrive():
            src, speed = env[op.src], env[op.speed]
            opposed = ((src > 0) & (speed < 0)) | ((src < 0) & (speed > 0))
            if op.table is not None:
                at = np.asarray(speed, dtype=np.int64)
                table = tables[op.table]
                factor = tb.lookup(table, at) if integer else np.asarray(tb.lookup_real(table, at, mode))
                scaled = fx.shift_round(src * factor, op.shift) if integer else src * factor * 2.0**-op.shift
            elif integer:
                scaled = fx.shift_round(src * op.k, op.shift)
            else:
                scaled = src * (op.k * 2.0**-op.shift if mode == "quant" else op.k_real)
            return np.where(opposed, scaled, src)
        case Store():
            src = env[op.src]
            return np.asarray(fx.shift_round(src, op.shift) if integer else src * 2.0**-op.shift)
        case _:
            assert_never(op)


def _pair(op: PairClamp, env: Mapping[str, np.ndarray]) -> np.ndarray:
    """One wheel of the pair after region.clamp (the integers the C computes; clamped inputs are whole)."""
    reg = region.PairRegion(edge=op.edge, sum_max=op.sum_max, diff_max=op.diff_max)
    right = np.asarray(env[op.right]).astype(np.int64)
    left = np.asarray(env[op.left]).astype(np.int64)
    return region.clamp(right, left, reg, integer=True)[op.side]


def _mixed(op: Mix, env: Mapping[str, np.ndarray]) -> np.ndarray:
    """One wheel of a body-frame pair before its clamp (int64: the C's 64-bit form when `wide`)."""
    along = np.asarray(env[op.along]).astype(np.int64) * op.k_along
    turn = np.asarray(env[op.turn]).astype(np.int64) * op.k_turn
    total = along + turn if op.side == 0 else along - turn
    if not op.wide:
        _check32(f"{op.dst} before its shift", total + rounding_half(op.shift))
    return np.asarray(fx.shift_round(total, op.shift))


def _flag(op: Op, inputs: Mapping[str, np.ndarray], env: Mapping[str, np.ndarray]) -> np.ndarray | None:
    """The clamp bit an op sets where its input was outside (a Clamp reads an input; a PairClamp sets
    its wheel's bit where the region moved that wheel)."""
    match op:
        case Clamp():
            raw = _input(inputs, op)
            _check32(op.field, raw)
            return ((raw < op.lo) | (raw > op.hi)).astype(np.int64) << op.bit
        case PairClamp():
            own = np.asarray(env[op.right if op.side == 0 else op.left]).astype(np.int64)
            return (_pair(op, env) != own).astype(np.int64) << op.bit
        case Mix():
            return (np.abs(_mixed(op, env)) > op.edge).astype(np.int64) * op.mask
        case Lookup() | Mul() | Scale() | Sum() | Backdrive() | Store():
            return None
        case _:
            assert_never(op)


def run(
    program: Program, tables: Mapping[str, tb.Table], inputs: Mapping[str, np.ndarray], mode: str = "int"
) -> dict[str, np.ndarray]:
    """Evaluate a program on arrays of inputs; returns output fields (shape (n, 2)) and 'clamped'."""
    out, flags = run_ops(program, program.ops, tables, inputs, env={}, mode=mode)
    result = {name: np.stack(vals, axis=-1) for name, vals in out.items()}
    result["clamped"] = flags if flags is not None else np.zeros(1, dtype=np.int64)
    return result


def run_by_rate(
    program: Program, tables: Mapping[str, tb.Table], inputs: Mapping[str, np.ndarray]
) -> dict[str, np.ndarray]:
    """The two-rate form: the slow ops give the state (and their clamp bits), the fast ops read it.
    Returns the same fields as run(), plus 'state' (n, len(state)) as the C's state struct holds it."""
    parts = by_rate(program)
    env: dict[str, np.ndarray] = {}
    _, slow_flags = run_ops(program, parts.slow, tables, inputs, env=env, mode="int")
    state = {name: env[name] for name in parts.state}
    out, fast_flags = run_ops(program, parts.fast, tables, inputs, env=dict(state), mode="int")
    result = {name: np.stack(vals, axis=-1) for name, vals in out.items()}
    zero = np.zeros(1, dtype=np.int64)
    result["clamped"] = (zero if slow_flags is None else slow_flags) | (zero if fast_flags is None else fast_flags)
    shape = np.shape(result["clamped"])
    result["state"] = np.stack([np.broadcast_to(state[n], shape) for n in parts.state], axis=-1)
    return result


def run_ops(
    program: Program,
    ops: Sequence[Op],
    tables: Mapping[str, tb.Table],
    inputs: Mapping[str, np.ndarray],
    *,
    env: dict[str, np.ndarray],
    mode: str,
) -> tuple[dict[str, list[np.ndarray]], np.ndarray | None]:
    """Evaluate some of a program's ops into env; returns the stored outputs and the clamp flags."""
    flags: np.ndarray | None = None
    for op in ops:
        bit = _flag(op, inputs, env)
        if bit is not None:
            flags = bit if flags is None else flags | bit
        value = _step(op, env, tables, inputs, mode=mode)
        if mode == "int":
            value = np.asarray(value, dtype=np.int64)
            _check32(op.dst, value)
        env[op.dst] = value
    st = program.call.outputs
    out = {m.name: [env.get(c, np.zeros(0)) for c in m.columns] for m in st.members}
    return out, flags
