"""The "C view": everything the templates print, decided here (names, types, literals, comments).

Templates only lay out text; no arithmetic happens in them.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, assert_never

from . import __version__, analysis, interface, model, pointform
from . import fixedpoint as fx
from . import tables as tb
from .cformat import num, rows, wrap
from .ops import rounding_half
from .opview import has_pairs, program_view, rates_view
from .synthesis import FORMAT_VERSION, Firmware
from .vehicle import Vehicle

CAUTION = (
    "CAUTION: feed-forward computed from wrong parameters can make a vehicle move unexpectedly.",
    "These values are engineering estimates, not a safety function. Safety-related motion control",
    "follows the applicable standards (e.g. ISO 3691-4, IEC 61508, ISO 13849) and local regulations",
    "and licensed practice. Test with the wheels off the floor or the vehicle restrained first.",
)

CALL_TITLES = {
    "lift": "Lift feed-forward: the lift motor's current for the planned carriage motion.",
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
    out = {m.name: Source(interface.lsb(fw.vehicle, m), m.unit) for m in stepped(fw)}
    speed = interface.SPEED
    return out | {interface.SPEED_DIFFERENCE: Source(interface.lsb(fw.vehicle, speed), speed.unit)}


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


def _model_value(v: Vehicle, dotted: str) -> str:
    """`section.key = value unit` from the validated model (SI), for table comments."""
    section, key = dotted.split(".")
    spec = model.SCHEMA[section][key] if section in model.SCHEMA else model.OPTIONAL_SCHEMA[section][key]
    if getattr(getattr(v, section), spec.field) is None:
        return f"{dotted} not set (its default applies)"
    value = model.value(v, dotted)
    unit = spec.kind.si.replace("**", "^")
    text = num(value) if isinstance(value, float) else value
    return f"{dotted} = {text}{' ' + unit if unit else ''}"


@dataclass(frozen=True, kw_only=True)
class TableHome:
    """What a table's C view reads: the sized tables and errors of one function, the proof of how they
    are looked up, one step of each table input, and the model (for the comments)."""

    tables: Mapping[str, tb.Table]
    errors: Mapping[str, tuple[tb.PieceError, ...]]
    proof: analysis.Proof
    sources: Mapping[str, Source]
    vehicle: Vehicle


def drive_home(fw: Firmware) -> TableHome:
    """The drive's tables (both of its functions)."""
    return TableHome(tables=fw.tables, errors=fw.errors, proof=fw.ff_proof, sources=_sources(fw), vehicle=fw.vehicle)


def _piece_view(home: TableHome, name: str, prefix: str, k: int) -> dict[str, Any]:
    """One piece of a table: its array, indexing constants and the comment lines about it."""
    spec, data, err = home.tables[name].spec, home.tables[name].pieces[k], home.errors[name][k]
    piece, src = spec.pieces[k], home.sources[spec.source]
    return {
        "array": f"{prefix}_tab_{name}_{k}",
        "count": len(data.entries),
        "x0": piece.x0,
        "x1": piece.x1,
        "segments": data.segments,
        "shift": data.shift,
        "mask": f"0x{data.mask:X}",
        "half": rounding_half(data.shift),
        "wide": home.proof.lookup_wide[name][k] and not home.proof.lookup_split[name][k],
        "split": home.proof.lookup_split[name][k],
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
        + (f", {num(piece.slack * spec.si_scale)} of it what the held factor may miss by" if piece.slack else "")
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


def table_view(home: TableHome, name: str, prefix: str) -> dict[str, Any]:
    """Everything the templates print about one table: arrays, lookup constants, comments."""
    table = home.tables[name]
    spec = table.spec
    src = home.sources[spec.source]
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
        "pieces": [_piece_view(home, name, prefix, k) for k in range(len(table.pieces))],
        "models": wrap([_model_value(home.vehicle, key) for key in spec.model_keys]),
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
    if fw.lift is not None:  # the lift's quantities by their own names (lift_speed), their own steps
        for m in (*interface.LIFT_IN.members, *interface.LIFT_OUT.members):
            name, one = f"lift_{m.name}", repr(interface.lsb(fw.vehicle, m))
            seen[name] = {"name": name, "unit": m.unit, "param": PARAMETER[m.unit], "step": one, "key": m.lsb_key}
    return list(seen.values())


def neighbour_lines(fw: Firmware, steps: dict[str, Any] | None = None) -> list[str]:
    """The header's lines on the largest current step between neighbouring inputs (steps.neighbour_steps,
    found here unless given)."""
    from .steps import neighbour_steps

    steps = neighbour_steps(fw) if steps is None else steps
    width = max(len(n) for n in steps)
    return [f"{n + ':':<{width + 1}} {num(s.amps)} A (from {s.at} to {s.at + 1} steps)" for n, s in steps.items()]


def lift_home(fw: Firmware) -> TableHome | None:
    """The lift function's tables, indexed by lift steps (none without a lift)."""
    lf, lt = fw.lift, fw.vehicle.lift
    if lf is None or lt is None:
        return None
    sources = {"payload": Source(lt.mass_lsb_kg, "kg"), "speed": Source(lt.speed_lsb_mps, "m/s")}
    return TableHome(tables=lf.tables, errors=lf.errors, proof=lf.proof, sources=sources, vehicle=fw.vehicle)


def lift_view(fw: Firmware, tables: dict[str, dict[str, Any]], prefix: str) -> dict[str, Any] | None:
    """The lift function: its body, bound, envelope edges and steps (none without a lift)."""
    lf, lt = fw.lift, fw.vehicle.lift
    if lf is None or lt is None:
        return None
    st = interface.LIFT
    limits = []
    for m in (*st.inputs.members, *st.outputs.members):
        steps = getattr(lf.limits, m.limit)
        unit, convert = interface.shown(m)
        limits.append(
            (f"LIFT_{m.name.upper()}_MAX", steps, f"{num(convert(steps * interface.lsb(fw.vehicle, m)))} {unit}")
        )
    return {
        "function": program_view(lf.program, lf.proof, tables, prefix),
        "bound": f"{num(lf.bound_a)} A (budget {num(lt.current_budget_a)} A)",
        "acc_step": f"{num(lf.amps_per_acc)} A (lift current step / 2^{lf.guard_bits})",
        "limits": limits,
        "lsbs": [
            (f"lift {m.name}", f"{num(interface.lsb(fw.vehicle, m))} {m.unit}")
            for m in (*st.inputs.members, *st.outputs.members)
        ],
        "bytes": lf.total_bytes,
    }


def context(fw: Firmware, *, neighbours: dict[str, Any] | None = None) -> dict[str, Any]:
    """The whole template context for one vehicle (`neighbours`: steps.neighbour_steps, if known)."""
    v = fw.vehicle
    prefix = v.name
    f = v.firmware
    home = drive_home(fw)
    tables = {n: table_view(home, n, prefix) for n in fw.tables}
    lifted = lift_home(fw)
    lift_tables = {n: table_view(lifted, n, prefix) for n in lifted.tables} if lifted is not None else {}
    return {
        "prefix": prefix,
        "PREFIX": prefix.upper(),
        "version": __version__,
        "format": FORMAT_VERSION,
        "fingerprint": f"0x{fw.fingerprint:08X}u",
        "caution": CAUTION,
        "header": f"{prefix}_ff.h",
        "guard": f"{prefix.upper()}_FF_H",
        "tables": [*tables.values(), *lift_tables.values()],
        "lift": lift_view(fw, lift_tables, prefix),
        "feedforward": program_view(fw.design.feedforward, fw.ff_proof, tables, prefix),
        **rates_view(fw, tables, prefix),
        "forward": program_view(fw.design.forward, fw.fwd_proof, tables, prefix),
        "pair_scale": f"{prefix}_pair_scale" if has_pairs(fw) else "",
        "calls": [_call_view(call, prefix) for call in interface.calls(v)]
        + ([_call_view(interface.LIFT, prefix)] if fw.lift is not None else []),
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
