"""The "C view": everything the templates print, decided here (names, types, literals, comments).

Templates only lay out text; no arithmetic happens in them.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, assert_never

from . import __version__, analysis, interface, model, pointform
from . import fixedpoint as fx
from . import tables as tb
from .analysis import Proof
from .cformat import num, rows, wrap
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
from .synthesis import FORMAT_VERSION, Firmware

CAUTION = (
    "CAUTION: feed-forward computed from wrong parameters can make a vehicle move unexpectedly.",
    "These values are engineering estimates, not a safety function. Safety-related motion control",
    "follows the applicable standards (e.g. ISO 3691-4, IEC 61508, ISO 13849) and local regulations",
    "and licensed practice. Test with the wheels off the floor or the vehicle restrained first.",
)

CALL_TITLES = {
    "feedforward": "Feed-forward: motor currents for the planned motion.",
    "forward": "Forward dynamics: predicted rim accelerations from measured motor currents (uses M^-1).",
}


@dataclass(frozen=True)
class Source:
    """How an input field maps to physical units, for comments."""

    lsb: float
    unit: str


def stepped(fw: Firmware) -> tuple[interface.Member, ...]:
    """Every quantity the firmware holds in steps: the inputs, the wheel pairs (which body-frame inputs
    turn into, and the tables are indexed by), then the current."""
    inputs = interface.ff_in(fw.vehicle).members
    wheels = (interface.SPEED, interface.ACCEL) if interface.ff_in(fw.vehicle).body else ()
    return (*inputs, *wheels, interface.CURRENT_OUT)


def _sources(fw: Firmware) -> dict[str, Source]:
    """Per quantity: one step in SI units, for comments."""
    return {m.name: Source(interface.lsb(fw.vehicle, m), m.unit) for m in stepped(fw)}


def _limit_lines(fw: Firmware) -> list[tuple[str, int, str]]:
    """(`<QUANTITY>_MAX`, its envelope edge in steps, that edge as a person reads it) per quantity."""
    out = []
    for m in stepped(fw):
        steps = getattr(fw.design.limits, m.limit)
        unit, convert = interface.shown(m)
        out.append((f"{m.name.upper()}_MAX", steps, f"{num(convert(steps * interface.lsb(fw.vehicle, m)))} {unit}"))
    for m, pair in ((interface.SPEED, fw.design.limits.speed_pair), (interface.ACCEL, fw.design.limits.accel_pair)):
        if pair.is_box:
            continue
        unit, half = interface.shown(m)[0], interface.lsb(fw.vehicle, m) / 2
        name = m.name.upper()
        out.append((f"{name}_SUM_MAX", int(pair.sum_max), f"|right + left|: forward {num(pair.sum_max * half)} {unit}"))
        turn = f"|right - left|: {num(pair.diff_max * half)} {unit} per wheel in a turn"
        out.append((f"{name}_DIFF_MAX", int(pair.diff_max), turn))
    return out


def _key_text(fw: Firmware, m: interface.Member) -> str:
    """The model key of a member's step, and when a body-frame step is not set, what stands for it."""
    section, key = m.lsb_key.split(".")
    if getattr(getattr(fw.vehicle, section), model.SCHEMA[section][key].field) is None:
        return f"{m.lsb_key} not set: its default, one wheel step"
    return m.lsb_key


def _lsb_lines(fw: Firmware) -> list[tuple[str, str]]:
    """One step of each quantity in SI units; quantities sharing a step key share a line ("pitch, roll")."""
    keys: dict[str, list[interface.Member]] = {}
    for m in stepped(fw):
        keys.setdefault(m.lsb_key, []).append(m)
    return [
        (", ".join(m.name for m in ms), f"{num(interface.lsb(fw.vehicle, ms[0]))} {ms[0].unit}") for ms in keys.values()
    ]


def _model_value(fw: Firmware, dotted: str) -> str:
    """`section.key = value unit` from the validated model (SI), for table comments."""
    section, key = dotted.split(".")
    spec = model.SCHEMA[section][key]
    if getattr(getattr(fw.vehicle, section), spec.field) is None:
        return f"{dotted} not set (its default applies)"
    value = model.value(fw.vehicle, dotted)
    unit = spec.kind.si.replace("**", "^")
    text = num(value) if isinstance(value, float) else value
    return f"{dotted} = {text}{' ' + unit if unit else ''}"


def _piece_view(fw: Firmware, name: str, prefix: str, k: int) -> dict[str, Any]:
    """One piece of a table: its array, indexing constants and the comment lines about it."""
    spec, data, err = fw.tables[name].spec, fw.tables[name].pieces[k], fw.errors[name][k]
    piece, src = spec.pieces[k], _sources(fw)[spec.source]
    return {
        "array": f"{prefix}_tab_{name}_{k}",
        "count": len(data.entries),
        "x0": piece.x0,
        "x1": piece.x1,
        "segments": data.segments,
        "shift": data.shift,
        "mask": f"0x{data.mask:X}",
        "half": rounding_half(data.shift),
        "wide": fw.ff_proof.lookup_wide[name][k] and not fw.ff_proof.lookup_split[name][k],
        "split": fw.ff_proof.lookup_split[name][k],
        "fold": _fold_view(data),
        "kind": data.kind.value,
        "value": int(data.entries[0]),
        "entries": rows([int(e) for e in data.entries]),
        "describe": (
            f"{'|x|' if spec.symmetry != 'none' else 'x'} in {piece.x0}..{piece.x1} steps "
            f"({num(piece.x0 * src.lsb)}..{num(piece.x1 * src.lsb)} {src.unit})"
            + (f", {piece.label}" if piece.label else "")
        ),
        "layout": _layout(data),
        "error": f"{num(err.total * spec.si_scale)} {spec.si_unit}"
        + (" (every input checked)" if err.exhaustive else " (dense sample plus slope margin)"),
    }


def _layout(data: tb.PieceData) -> str:
    """How the piece is stored, for its C comment."""
    width = 1 << data.shift
    match data.kind:
        case tb.PieceKind.CONSTANT:
            return "constant"
        case tb.PieceKind.DIRECT:
            return "one entry per input step (no interpolation)"
        case tb.PieceKind.ONE_SEGMENT:
            return f"1 segment of {width} steps, breakpoints at x0 + k*{width}"
        case tb.PieceKind.INDEXED:
            return f"{data.segments} segments of {width} steps, breakpoints at x0 + k*{width}"
        case _:
            assert_never(data.kind)


def _fold_view(data: tb.PieceData) -> dict[str, int] | None:
    """A one-segment piece's folded multiply-add constants, when the proof allows it."""
    folded = analysis.folded_segment(data)
    return None if folded is None else {"scale": 1 << data.shift}


def table_view(fw: Firmware, name: str, prefix: str) -> dict[str, Any]:
    """Everything the templates print about one table: arrays, lookup constants, comments."""
    table = fw.tables[name]
    spec = table.spec
    src = _sources(fw)[spec.source]
    return {
        "name": name,
        "ctype": f"{'u' if _unsigned(table) else ''}int{spec.bits}_t",
        "symmetry": spec.symmetry,
        "piece_edge": spec.piece_edge,
        "needs_x": spec.piece_edge is not None or any(p.kind is not tb.PieceKind.CONSTANT for p in table.pieces),
        "meaning": spec.meaning,
        "stored": _stored_text(spec, unsigned=_unsigned(table)),
        "step_si": _si_text(2.0**-spec.frac_bits * spec.si_scale, spec.si_unit),
        "q_note": _q_note(spec),
        "helper": f"{prefix}_lookup_{name}",
        "input": spec.source,
        "input_lsb": f"{num(src.lsb)} {src.unit}",
        "pieces": [_piece_view(fw, name, prefix, k) for k in range(len(table.pieces))],
        "models": wrap([_model_value(fw, key) for key in spec.model_keys]),
        "bytes": table.bytes,
        "lo": spec.pieces[0].x0,
        "hi": spec.pieces[-1].x1,
        "public": f"{prefix}_table_{name}",
    }


def _unsigned(table: tb.Table) -> bool:
    """int16 tables with no negative entry are stored as uint16_t: the same values, and Cortex-M0+ loads
    them with an immediate offset (its signed halfword load takes a register offset only)."""
    return table.spec.bits == 16 and all(int(p.entries.min()) >= 0 for p in table.pieces)


def _power_of_two(exp: int) -> str:
    return "1" if exp == 0 else f"2^{exp}"


def _si_text(value: float, unit: str) -> str:
    """A value with its unit; a pure number stays a number (no '1' as a unit)."""
    return num(value) if unit == "1" else f"{num(value)} {unit}"


def _q_note(spec: tb.TableSpec) -> str:
    """Q notation when it fits (Q15.0), else the word and the weight of its step (int16, steps of 2^14)."""
    q = fx.q_name(spec.frac_bits, spec.bits)
    return q if q.startswith("Q") else f"int{spec.bits}, steps of {_power_of_two(-spec.frac_bits)}"


def _stored_text(spec: tb.TableSpec, *, unsigned: bool) -> str:
    """What one stored integer step is worth: in the table's working unit and in SI (the Q format is that
    of the signed word even when the entries, all >= 0, are stored unsigned)."""
    q = fx.q_name(spec.frac_bits, spec.bits)
    ctype = f"{'u' if unsigned else ''}int{spec.bits}_t"
    fmt = f"{ctype} entries in {q}" if q.startswith("Q") else f"{ctype} entries"
    working = f"{_power_of_two(-spec.frac_bits)} {spec.unit}" if spec.unit != "1" else _power_of_two(-spec.frac_bits)
    return f"{fmt}; one stored step = {working} = {_si_text(2.0**-spec.frac_bits * spec.si_scale, spec.si_unit)}"


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


def _has_pairs(fw: Firmware) -> bool:
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
                "dst": f"{op.field}[{op.index}]",
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
    exact = any(p["kind"] == "constant" and p["value"] % (1 << op.shift) == 0 for p in table["pieces"])
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
        elif key is not None and j - k > 1:
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


def _struct_view(st: interface.Struct, prefix: str, clamp_text: str = "") -> dict[str, Any]:
    members = [(m.c_decl().ljust(19), m.c_comment()) for m in st.members]
    if st.clamped:
        members.append(("uint32_t clamped;".ljust(19), clamp_text))
    return {"ctype": st.c_type(prefix), "members": members}


def _call_view(call: interface.Call, prefix: str) -> dict[str, Any]:
    """The structs and clamp-bit names of one generated function, from the interface description."""
    return {
        "title": CALL_TITLES[call.name],
        "inputs": _struct_view(call.inputs, prefix),
        "outputs": _struct_view(call.outputs, prefix, f"{prefix.upper()}_{call.clamp_tag}_* bits"),
        "clamp_bits": [(name, f"0x{mask:02X}u") for name, mask in call.clamp_names(prefix)],
    }


PARAMETER = {
    "m/s": "m_per_s",
    "m/s^2": "m_per_s2",
    "rad": "rad",
    "rad/s": "rad_per_s",
    "rad/s^2": "rad_per_s2",
    "kg": "kg",
    "A": "amps",
}
"""The C parameter name of an SI value, by its unit (a name says its unit)."""


def conversions(fw: Firmware) -> list[dict[str, str]]:
    """One SI <-> step pair of helpers per quantity of the two calls (feed-forward inputs, the forward
    helper's, the current), from the interface description; the step as a literal that reads back as the
    same double."""
    seen: dict[str, dict[str, str]] = {}
    calls = (interface.ff_in(fw.vehicle), interface.FWD_IN, interface.FF_OUT, interface.FWD_OUT)
    for m in (mem for st in calls for mem in st.members):
        step = interface.lsb(fw.vehicle, m)
        seen.setdefault(
            m.name,
            {"name": m.name, "unit": m.unit, "param": PARAMETER[m.unit], "step": repr(step), "key": _key_text(fw, m)},
        )
    return list(seen.values())


def neighbour_lines(fw: Firmware, steps: dict[str, Any] | None = None) -> list[str]:
    """The header's lines on the largest current step between neighbouring inputs (steps.neighbour_steps,
    found here unless given)."""
    from .steps import neighbour_steps

    steps = neighbour_steps(fw) if steps is None else steps
    width = max(len(n) for n in steps)
    return [f"{n + ':':<{width + 1}} {num(s.amps)} A (from {s.at} to {s.at + 1} steps)" for n, s in steps.items()]


def context(fw: Firmware, *, neighbours: dict[str, Any] | None = None) -> dict[str, Any]:
    """The whole template context for one vehicle (`neighbours`: steps.neighbour_steps, if known)."""
    v = fw.vehicle
    prefix = v.name
    f = v.firmware
    tables = {n: table_view(fw, n, prefix) for n in fw.tables}
    return {
        "prefix": prefix,
        "PREFIX": prefix.upper(),
        "version": __version__,
        "format": FORMAT_VERSION,
        "fingerprint": f"0x{fw.fingerprint:08X}u",
        "caution": CAUTION,
        "header": f"{prefix}_ff.h",
        "guard": f"{prefix.upper()}_FF_H",
        "tables": list(tables.values()),
        "feedforward": program_view(fw.design.feedforward, fw.ff_proof, tables, prefix),
        **rates_view(fw, tables, prefix),
        "forward": program_view(fw.design.forward, fw.fwd_proof, tables, prefix),
        "pair_scale": f"{prefix}_pair_scale" if _has_pairs(fw) else "",
        "calls": [_call_view(call, prefix) for call in interface.calls(v)],
        "limits": _limit_lines(fw),
        "lsbs": _lsb_lines(fw),
        "ff_bound": f"{num(fw.ff_bound_a)} A (budget {num(f.current_budget_a)} A)",
        "fwd_bound": f"{num(fw.fwd_bound_mps2)} m/s^2 (budget {num(fw.fwd_budget_mps2)} m/s^2)",
        "total_bytes": fw.total_bytes,
        "acc_step": f"{num(fw.design.amps_per_acc)} A (current step / 2^{fw.design.guard_bits})",
        "conversions": conversions(fw),
        "neighbour_steps": neighbour_lines(fw, neighbours),
        "point": pointform.c_view(pointform.point_form(fw)),
    }
