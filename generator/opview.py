"""The C view of the programs: what ff/ops.j2 prints for each op and for each program part (slow, fast,
one call), with the lookups of one input in one block and the products made inside it where exact.
cview.py puts these beside the tables and the rest of what the templates print.
"""

from __future__ import annotations

from typing import Any, assert_never

from . import fixedpoint as fx
from .analysis import Proof
from .cformat import num
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
    by_rate,
    looked_up,
    moves_pairs,
    op_inputs,
    op_table,
    rounding_half,
    signal_product,
)
from .synthesis import Firmware


def _clamp_view(op: Clamp, bit_name: str, prefix: str) -> dict[str, Any]:
    """A clamp as one unsigned range test: (uint32_t)x - lo > hi - lo exactly when x is outside lo..hi."""
    assert op.lo <= 0 <= op.hi, "every envelope contains zero"
    where = f"{op.field}[{op.index}]" if op.index is not None else op.field
    return {
        "kind": "clamp",
        "dst": op.dst,
        "src": where,
        "lo": op.lo,
        "hi": op.hi,
        "bit": bit_name,
        "offset": -op.lo,
        "span": op.hi - op.lo,
        "unlikely": f"{prefix.upper()}_UNLIKELY",
    }


def _pair_view(op: PairClamp, clamp_names: list[str], prefix: str) -> dict[str, Any]:
    """A pair clamp as region.clamp: the right wheel's op prints one block for both wheels (one test when
    the pair is inside, the common case); the left wheel's op prints nothing more."""
    if op.side == 1:
        return {"kind": "pair_clamp_done", "dst": op.dst}
    return {
        "kind": "pair_clamp",
        "dst_r": op.dst,
        "dst_l": op.dst[:-1] + "l",
        "right": op.right,
        "left": op.left,
        "sum_max": op.sum_max,
        "diff_max": op.diff_max,
        "sum_span": 2 * op.sum_max,  # (uint32_t)(s + sum_max) > sum_span: outside [-sum_max, sum_max]
        "diff_span": 2 * op.diff_max,
        "bit_r": clamp_names[op.bit],
        "bit_l": clamp_names[op.bit + 1],  # a pair's columns are adjacent (interface.Member.columns)
        "unlikely": f"{prefix.upper()}_UNLIKELY",
        "scale": f"{prefix}_pair_scale",
    }


def _mix_view(op: Mix, clamp_names: list[str], prefix: str, proof: Proof) -> dict[str, Any]:
    """A body-frame pair to one wheel (bodyframe.py): the rounded sum as one C expression, in 64 bits when
    the proof says so, then the wheel's clamp as one unsigned range test; no test when the proven range
    of the clamped body inputs keeps the wheel inside its edge anyway (body-frame limits within the box)."""
    cast = "(int64_t)" if op.wide else ""
    terms = [
        f"{cast}{name}" + ("" if k == 1 else f" * {k}") for name, k in ((op.along, op.k_along), (op.turn, op.k_turn))
    ]
    total = f"{terms[0]} {'+' if op.side == 0 else '-'} {terms[1]}"
    if op.shift > 0:
        total = f"({total} + {rounding_half(op.shift)}) >> {op.shift}"
    bits = [name for k, name in enumerate(clamp_names) if op.mask >> k & 1]
    along = proof.ranges[op.along] * fx.Interval(op.k_along, op.k_along)
    turn = proof.ranges[op.turn] * fx.Interval(op.k_turn, op.k_turn)
    reach = (along + turn.hull(-turn)).shift_round(op.shift)
    return {
        "kind": "mix",
        "inside": -op.edge <= reach.lo and reach.hi <= op.edge,
        "dst": op.dst,
        "wide": op.wide,  # then the wheel is clamped in 64 bits, before it becomes an int32
        "expr": total,
        "edge": op.edge,
        "span": 2 * op.edge,
        "bits": " | ".join(bits),
        "unlikely": f"{prefix.upper()}_UNLIKELY",
    }


LONG_SHIFT = 10
"""Rounding shifts from here up use the ROUND_SHIFT macro: 2^(s-1) no longer fits a Thumb-1 immediate."""


def _round_macro(shift: int, prefix: str) -> str | None:
    """The rounding-shift macro's name where the shift is long enough to gain from it (else None)."""
    return f"{prefix.upper()}_ROUND_SHIFT" if LONG_SHIFT <= shift <= 30 else None


def has_pairs(fw: Firmware) -> bool:
    """Whether either program clamps a wheel pair into a region (then the C needs the scaling helper)."""
    return any(moves_pairs(op) for op in (*fw.design.feedforward.ops, *fw.design.forward.ops))


def _op_view(op: Op, proof: Proof, clamp_names: list[str], prefix: str) -> dict[str, Any]:
    """What ops.j2 prints for one op (the C form of each op kind lives in that template)."""
    match op:
        case Clamp():
            return _clamp_view(op, clamp_names[op.bit], prefix)
        case PairClamp():
            return _pair_view(op, clamp_names, prefix)
        case Mix():
            return _mix_view(op, clamp_names, prefix, proof)
        case Lookup():
            return {"kind": "lookup", "dst": op.dst, "func": f"{prefix}_lookup_{op.table}", "src": op.src}
        case Mul():
            view = _product_view(op.dst, op.a, op.b, shift=op.shift, proof=proof, b_one=False)
            return view | {"round": _round_macro(op.shift, prefix)}
        case Scale():
            view = _product_view(op.dst, op.a, str(op.k), shift=op.shift, proof=proof, b_one=op.k == 1)
            return view | {"round": _round_macro(op.shift, prefix)}
        case Sum():
            terms = [("-" if s < 0 else ("" if i == 0 else "+"), n) for i, (s, n) in enumerate(op.terms)]
            return {"kind": "sum", "dst": op.dst, "terms": terms}
        case Backdrive():
            return {
                "kind": "backdrive",
                "dst": op.dst,
                "src": op.src,
                "speed": op.speed,
                "k": "k" if op.table is not None else op.k,
                "shift": op.shift,
                "half": rounding_half(op.shift),
                "wide": proof.wide[op.dst],
                "split": bool(proof.split[op.dst]),
                "mask": f"0x{(1 << op.shift) - 1:X}",
                "k_real": num(op.k_real),
                "factor": None if op.table is None else f"{prefix}_lookup_{op.table}",
                "round": _round_macro(op.shift, prefix),
            }
        case Store():
            return {
                "kind": "store",
                "dst": op.field if op.index is None else f"{op.field}[{op.index}]",
                "src": op.src,
                "shift": op.shift,
                "half": rounding_half(op.shift),
                "round": _round_macro(op.shift, prefix),
            }
        case _:
            assert_never(op)


def _product_view(dst: str, a: str, b: str, *, shift: int, proof: Proof, b_one: bool) -> dict[str, Any]:
    """A product of a signal and a signal or constant (`b` as C text), its rounding and wide forms."""
    return {
        "kind": "mul",
        "dst": dst,
        "a": a,
        "b": b,
        "b_one": b_one,
        "shift": max(shift, 0),
        "scale": 1 << max(-shift, 0),
        "up": shift < 0,
        "half": rounding_half(shift),
        "wide": proof.wide[dst] and not proof.split[dst],
        **_split_view(a, b, shift, proof.split[dst]),
    }


def _split_view(a: str, b: str, shift: int, operand: str) -> dict[str, Any]:
    """The exact two-part form of a wide product: `hi` split at the shift, `by` the other operand."""
    if not operand:
        return {"split": False}
    hi, by = (a, b) if operand == "a" else (b, a)
    return {"split": True, "hi": hi, "by": by, "mask": f"0x{(1 << shift) - 1:X}"}


OPERANDS = ("a", "b", "src", "speed", "hi", "by", "right", "left", "own")


def _renamed(view: dict[str, Any], reads: dict[str, str]) -> dict[str, Any]:
    """An op view whose operands named in `reads` are read through that expression instead."""
    out: dict[str, Any] = {k: reads.get(v, v) if k in OPERANDS and isinstance(v, str) else v for k, v in view.items()}
    if "terms" in out:
        out["terms"] = [(sign, reads.get(name, name)) for sign, name in out["terms"]]
    return out


GroupKey = tuple[str, bool, int | None]


def _fused_product(
    ops: tuple[Op, ...], start: int, member: str, *, table: dict[str, Any], proof: Proof, whole: tuple[Op, ...]
) -> tuple[int, Mul] | None:
    """The one product that reads a group member, when it can be made inside the group: the whole
    program reads the member nowhere else (not in the other rate's part either), its other operand
    exists before the group, it is a plain 32-bit rounded product, and one of the table's pieces is a
    constant that makes it exact (a multiple of 2^shift: then it is one multiply by a literal, with no
    rounding). `ops` is the part being printed, `whole` the program. Returns the product's index in
    `ops` and the product."""
    if sum(member in op_inputs(op) for op in whole) != 1:
        return None
    readers = [i for i, op in enumerate(ops) if member in op_inputs(op)]
    if len(readers) != 1 or (op := signal_product(ops[readers[0]])) is None or op.a == op.b:
        return None
    other = op.b if op.a == member else op.a
    later = {o.dst for o in ops[start:]}
    plain = op.shift > 0 and not proof.wide[op.dst] and not proof.split[op.dst]
    exact = plain and any(p["kind"] == "constant" and p["value"] % (1 << op.shift) == 0 for p in table["pieces"])
    return (readers[0], op) if other not in later and plain and exact else None


def _fused_view(op: Mul, member: str, table: dict[str, Any], reads: dict[str, str]) -> dict[str, Any]:
    """A product made inside a lookup group: per piece, the looked-up value times the other operand;
    `exact[k]` is the literal multiplier where piece k is a constant multiple of 2^shift (else None)."""
    other = op.b if op.a == member else op.a
    exact = [
        p["value"] >> op.shift if p["kind"] == "constant" and p["value"] % (1 << op.shift) == 0 else None
        for p in table["pieces"]
    ]
    return {
        "dst": op.dst,
        "other": reads.get(other, other),
        "shift": op.shift,
        "half": rounding_half(op.shift),
        "exact": exact,
    }


def _group_view(
    ops: tuple[Op, ...],
    k: int,
    j: int,
    key: GroupKey,
    *,
    tables: dict[str, dict[str, Any]],
    proof: Proof,
    reads: dict[str, str],
    whole: tuple[Op, ...],
) -> tuple[dict[str, Any], set[int]]:
    """One inline block for the lookups ops[k:j] (of the part `ops` of the program `whole`); returns it
    and the indices of the products it makes."""
    members: list[dict[str, Any]] = []
    taken: set[int] = set()
    for op in ops[k:j]:
        table = op_table(op)
        assert table is not None
        fused = _fused_product(ops, k, op.dst, table=tables[table], proof=proof, whole=whole)
        if fused is not None:
            taken.add(fused[0])
        t = tables[table]
        view = None if fused is None else _fused_view(fused[1], op.dst, t, reads)
        members.append({"dst": op.dst, "t": t, "fused": view, "odd": t["symmetry"] == "odd"})
    view = {
        "kind": "group",
        "src": key[0],
        "abs": key[1],
        "piece_edge": key[2],
        "members": members,
        "needs_x": key[2] is not None or any(m["t"]["needs_x"] for m in members),
        "negate_after": [m["dst"] for m in members if m["odd"] and m["fused"] is None],
    }
    return view, taken


def _group_key(op: Op, tables: dict[str, dict[str, Any]]) -> GroupKey | None:
    """Lookups that may share one inline block: same input, same symmetry class, same piece edge."""
    table = looked_up(op)  # a Backdrive's table is looked up in its branch
    if table is None:
        return None
    t = tables[table]
    return (op_inputs(op)[0], t["symmetry"] != "none", t["piece_edge"])


def program_view(
    prog: Program,
    proof: Proof,
    tables: dict[str, dict[str, Any]],
    prefix: str,
    *,
    ops: tuple[Op, ...] | None = None,
    flags: str = "flags",
    reads: dict[str, str] | None = None,
) -> dict[str, Any]:
    """One view per op (of `ops`, default all); adjacent lookups of the same input with the same piece edge
    share one inline block (one |x|, one comparison), which the compiler cannot merge across two calls
    on its own. `flags` is how the clamp bits are stored after the last clamp; `reads` maps signals to
    the C expression that reads them where they are used (the fast part's state members)."""
    views: list[dict[str, Any]] = []
    ops = tuple(prog.ops) if ops is None else ops
    made_in_groups: set[int] = set()
    k = 0
    while k < len(ops):
        key = _group_key(ops[k], tables)
        j = k + 1
        while key is not None and j < len(ops) and _group_key(ops[j], tables) == key:
            j += 1
        if k in made_in_groups:
            pass
        elif key is not None and (j - k > 1 or isinstance(ops[k], Lookup)):  # a lone lookup inline too
            view, taken = _group_view(
                ops, k, j, key, tables=tables, proof=proof, reads=reads or {}, whole=tuple(prog.ops)
            )
            views.append(view)
            made_in_groups |= taken
        else:
            view = _op_view(ops[k], proof, [n for n, _ in prog.call.clamp_names(prefix)], prefix)
            views.append(_renamed(view, reads) if reads else view)
        k = j
    last = max(i for i, v in enumerate(views) if v["kind"] in ("clamp", "pair_clamp", "pair_clamp_done", "mix"))
    views.insert(last + 1, {"kind": flags})
    return {"name": prog.name, "ops": views}


def rates_view(fw: Firmware, tables: dict[str, dict[str, Any]], prefix: str) -> dict[str, Any]:
    """The two-rate form of the feed-forward: slow and fast op lists and the state between them."""
    prog = fw.design.feedforward
    parts = by_rate(prog)
    state = []
    for name in parts.state:
        r = fw.ff_proof.ranges[name]
        state.append({"name": name, "comment": f"{r.lo} .. {r.hi}"})
    return {
        "slow": program_view(prog, fw.ff_proof, tables, prefix, ops=parts.slow, flags="flags_state"),
        "fast": program_view(
            prog,
            fw.ff_proof,
            tables,
            prefix,
            ops=parts.fast,
            flags="flags_merge",
            reads={name: f"state->{name}" for name in parts.state},  # at each use: no copies to spill
        ),
        "state": state,
    }
