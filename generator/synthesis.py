"""From a validated vehicle to sized, proven firmware tables: the product of the fixed-point stage."""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from . import __version__, analysis, dynamics, interface, liftfirmware, program, sizing, stability
from . import tables as tb
from .errors import CheckFailed
from .ops import op_table, wide_conversion
from .vehicle import Vehicle

FORMAT_VERSION = 4
"""Part of every fingerprint and checked by the generated C: raised when the same model file gives a
different model or different integers (2: the efficiency blends through zero speed; 3: int32 tables
store no bits their uses round away; 4: the speed tables may split at the Stribeck edge and the cosines
fold into the payload tables), so files made before read as stale."""
FORWARD_BUDGET_FACTOR = 2.0


@dataclass(frozen=True)
class Firmware:
    """Everything the renderer and the reports need; all bounds proven, not sampled."""

    vehicle: Vehicle
    design: program.Design
    tables: dict[str, tb.Table]
    errors: dict[str, tuple[tb.PieceError, ...]]
    ff_proof: analysis.Proof
    fwd_proof: analysis.Proof
    ff_bound_a: float
    fwd_bound_mps2: float
    fwd_budget_mps2: float
    fingerprint: int
    rounded_best_a: float | None = None  # exact designs: the best bound with rounded operands, A
    over_cap: bool = False  # firmware.table_bytes_max cannot hold what the budget needs: fewest bytes instead
    lift: liftfirmware.LiftFirmware | None = None  # the lift's own function, when the model has a lift
    instructions: int = 0  # the sizing cost model's lookup instructions per feed-forward call

    def products64(self) -> list[str]:
        """Products of either function that need a 64-bit multiply (a library call on Cortex-M0+); a
        table's interpolation is named once, a forward-dynamics signal with its function."""
        ff = self.ff_proof.products64(self.design.feedforward)
        fwd = self.fwd_proof.products64(self.design.forward)
        return ff + [n if n.startswith("lookup ") else f"forward {n}" for n in fwd if n not in ff]

    @property
    def total_bytes(self) -> int:
        return sum(t.bytes for t in self.tables.values())

    def __repr__(self) -> str:
        return (
            f"Firmware({self.vehicle.name!r}, {self.total_bytes} bytes, bound {self.ff_bound_a:.4g} A, "
            f"fingerprint 0x{self.fingerprint:08X})"
        )


def fingerprint(v: Vehicle) -> int:
    """32-bit hash of the normalised model and the generator version (stable across runs)."""
    text = json.dumps(
        {"model": v.normalised(), "generator": __version__, "format": FORMAT_VERSION},
        sort_keys=True,
        separators=(",", ":"),
    )
    return int(hashlib.sha256(text.encode()).hexdigest()[:8], 16)


def forward_budget(v: Vehicle) -> float:
    """Forward-dynamics accuracy budget, m/s^2: firmware.accel_budget, else the acceleration of
    FORWARD_BUDGET_FACTOR x current_budget on both wheels (so the prediction is as good as the
    feed-forward it is compared against)."""
    if v.firmware.accel_budget_mps2 is not None:
        return v.firmware.accel_budget_mps2
    pay = np.linspace(0, v.payload.mass_max_kg, 257)
    d, o = dynamics.inverse_mass_matrix_entries(v, pay)
    force = v.firmware.current_budget_a / dynamics.motor_gain(v) / (v.drive.efficiency * v.drive.backdrive_efficiency)
    return FORWARD_BUDGET_FACTOR * float(np.max(np.abs(d) + np.abs(o))) * force


def synthesise(v: Vehicle) -> Firmware:
    """Design the programs, size every table to the budget, prove ranges; CheckFailed when impossible.
    A vehicle that tips over its envelope is refused here too (ModelError), however it was built.

    Products too wide for 32 bits first round their operands (no 64-bit multiply), on tables that store
    no bits their uses round away (program._coarser); when that misses the budget, on tables at full
    precision; only when that design cannot meet the budget either do the products keep every bit
    (exact two-part products, else 64 bits). A vehicle with a lift gets the lift's function too, sized
    to its own budget (liftfirmware.py)."""
    return dataclasses.replace(_drive(v), lift=liftfirmware.synthesise(v))


def _drive(v: Vehicle) -> Firmware:
    """The drive's two functions (synthesise): when sizing minimises instructions, the cosines folded
    into the payload tables where that meets the budget within the byte cap for no more lookup
    instructions (it also drops two products the cost model does not count), or where only it fits the
    cap; else the layout without. The fold is sized only for answers of no more instructions than the
    layout without it when that one fits the cap (sizing.Objective.ceiling), which prunes its search."""
    stability.check(v)
    best = _layout(v, flat=False)
    if v.firmware.sizing != "instructions":
        return best
    ceiling = math.inf if best.over_cap else _ceiling(best)
    try:
        folded = _layout(v, flat=True, ceiling=ceiling)
    except (CheckFailed, sizing.NotCheaper):
        return best
    if folded.over_cap and best.over_cap:  # both sized for the fewest bytes: the fewer
        return folded if folded.total_bytes < best.total_bytes else best
    if folded.over_cap or best.over_cap:  # within firmware.table_bytes_max beats over it
        return best if folded.over_cap else folded
    return folded if folded.instructions <= best.instructions else best


def _ceiling(fw: Firmware) -> float:
    """The sizing cost just above `fw`'s lookup instructions: answers under it have no more."""
    return (fw.instructions + 1) * sizing.INSTRUCTION_WEIGHT


def _layout(v: Vehicle, *, flat: bool, ceiling: float = math.inf) -> Firmware:
    """Split at the Stribeck edge where that costs fewer lookup instructions (then bytes) than the first
    design that fits without it (_plain); that one is sized only for answers of no more instructions
    than the split's (sizing.Objective.ceiling), which prunes most of its search. Under a finite
    `ceiling` both look only below it (sizing.NotCheaper when neither finds an answer there)."""
    split = _split(v, flat=flat, ceiling=ceiling)
    if split is None:
        return _plain(v, flat=flat, ceiling=ceiling)
    try:
        plain = _plain(v, flat=flat, ceiling=min(ceiling, _ceiling(split)))
    except (sizing.NotCheaper, CheckFailed):  # the split is the only design that meets the budget
        return split
    if plain.over_cap:  # the split fits firmware.table_bytes_max
        return split
    return split if (split.instructions, split.total_bytes) < (plain.instructions, plain.total_bytes) else plain


def _split(v: Vehicle, *, flat: bool = False, ceiling: float = math.inf) -> Firmware | None:
    """When sizing minimises instructions and the Stribeck dip ends inside the envelope: the design whose
    speed tables split there (program.design), if it meets the budget within firmware.table_bytes_max
    (and under `ceiling`, sizing's cost units)."""
    if v.firmware.sizing != "instructions":
        return None
    des = program.design(v, stribeck=True, flat=flat)
    edge = des.specs["friction"].pieces[0].x1
    if edge == des.limits.deadband or edge >= tb.MAX_SEGMENTS:  # no dip past the deadband, or no table
        return None  # could hold one entry per step to the edge (a very fine speed step): not worth sizing
    try:
        fw = _synthesise(v, des, explain=False, ceiling=ceiling)
    except (CheckFailed, sizing.NotCheaper):
        return None
    return None if fw.over_cap else fw


def _plain(v: Vehicle, *, flat: bool = False, ceiling: float = math.inf) -> Firmware:
    """The first design without the split, fastest arithmetic first (_designs), that meets the budget
    within firmware.table_bytes_max; over the cap only when none fits it: then the first that meets it.
    Regression (invented vehicle 3, int32, cap 1510): the first to meet the budget was taken though over
    the cap, where the exact one fitted in 1324 bytes. CheckFailed (with the levers) when none meets the
    budget; sizing.NotCheaper when none that does costs less than `ceiling` (sizing's cost units)."""
    tries = _designs(v, flat=flat)
    over: list[Firmware] = []
    for k, des in enumerate(tries):
        last = k == len(tries) - 1
        explain = last and not over and not flat and ceiling == math.inf
        try:
            fw = _synthesise(v, des, explain=explain, ceiling=ceiling)
        except (CheckFailed, sizing.NotCheaper):
            if last and not over:
                raise
            continue
        if not fw.over_cap:
            return _with_rounded_best(v, fw, met=over, alone=len(tries) == 1)
        over += [] if des.coarse else [fw]  # coarse tables only where they fit the cap
    return _with_rounded_best(v, over[0], met=over[1:], alone=len(tries) == 1)  # none fits: the fastest, as before


def _with_rounded_best(v: Vehicle, fw: Firmware, *, met: list[Firmware], alone: bool) -> Firmware:
    """An exact design that alone meets the budget carries the rounded designs' best bound (the report
    says how far they fell short)."""
    if not fw.design.exact or alone or any(not f.design.exact for f in met):
        return fw
    rounded = min(best_bound_a(v, exact=False), best_bound_a(v, exact=False, coarse=True))
    return dataclasses.replace(fw, rounded_best_a=rounded)


def _same(a: program.Design, b: program.Design) -> bool:
    """The same programs over tables of the same formats."""
    formats = lambda d: {n: (t.frac_bits, t.bits) for n, t in d.specs.items()}  # noqa: E731
    return a.feedforward.ops == b.feedforward.ops and a.forward.ops == b.forward.ops and formats(a) == formats(b)


def _designs(v: Vehicle, *, flat: bool = False) -> list[program.Design]:
    """The distinct designs to try, fastest first: rounded on coarse tables (int32 words, when sizing
    minimises instructions; they may take more table bytes for the same bound), rounded, exact."""
    fine = program.design(v, coarse=False, flat=flat)
    out = [fine]
    if v.firmware.sizing == "instructions" and v.firmware.word == "int32":
        coarse = program.design(v, flat=flat)
        if coarse.coarse:  # some table did lose bits
            out.insert(0, coarse)
    exact = program.design(v, exact=True, flat=flat)
    return out if _same(fine, exact) else [*out, exact]


def _synthesise(v: Vehicle, des: program.Design, *, explain: bool = True, ceiling: float = math.inf) -> Firmware:
    """Size and prove one design; `explain` adds the levers to a budget failure (a search, not free)."""
    fw = v.firmware
    where = f"{v.source}: firmware.current_budget"
    try:
        ff, fwd = _size_both(v, des, ceiling=ceiling)
    except _Missed as miss:
        if miss.forward:
            raise CheckFailed(
                f"{v.source}: firmware.accel_budget: {miss.exc} of {fw.accel_lsb_mps2:g} m/s^2 (accel_lsb)"
            ) from None
        raise CheckFailed(
            f"{where}: {miss.exc} of {fw.current_lsb_a:g} A (current_lsb)" + (f"; {levers(v)}" if explain else "")
        ) from None
    tables = {n: fwd.tables[n] for n in des.specs}
    errors = {n: fwd.errors[n] for n in des.specs}
    return Firmware(
        vehicle=v,
        design=des,
        tables=tables,
        errors=errors,
        ff_proof=analysis.prove(des.feedforward, tables),
        fwd_proof=analysis.prove(des.forward, tables),
        ff_bound_a=ff.bound_steps * fw.current_lsb_a,
        fwd_bound_mps2=fwd.bound_steps * fw.accel_lsb_mps2,
        fwd_budget_mps2=forward_budget(v),
        fingerprint=fingerprint(v),
        over_cap=ff.total_bytes + fwd.total_bytes > _cap(v),
        instructions=ff.instructions,
    )


class _Missed(Exception):
    """A sizing that cannot meet its budget: which function, and why."""

    def __init__(self, exc: CheckFailed, *, forward: bool) -> None:
        super().__init__(str(exc))
        self.exc, self.forward = exc, forward


def _size_both(v: Vehicle, des: program.Design, *, ceiling: float = math.inf) -> tuple[sizing.Sizing, sizing.Sizing]:
    """Feed-forward tables, then the forward function's own (M^-1) with the former fixed. Under the
    instructions objective the byte cap covers both: while the pair misses it, the feed-forward tables
    are sized again under the cap less the fewest forward bytes with the last ones (those change with
    them, hence a few rounds, then their fewest bytes); of the pairs within the cap the fewest
    instructions (then bytes), else the fewest bytes (Firmware.over_cap then says so)."""
    fw = v.firmware
    ff_names = [n for n in des.specs if n not in _forward_only(des)]
    ff_budget = fw.current_budget_a / fw.current_lsb_a

    def pair(room: float) -> tuple[sizing.Sizing, sizing.Sizing]:
        objective = sizing.Objective(fw.sizing, room, ceiling)
        ff = _size(des.feedforward, des, ff_names, ff_budget, what=f"{fw.current_budget_a:g} A", objective=objective)
        return ff, _size_forward(v, des, ff, _cap(v) - ff.total_bytes)

    pairs = [pair(_cap(v))]
    reserves: set[int] = set()
    for _ in range(_RESIZE_ROUNDS):
        ff, fwd = pairs[-1]
        if ff.total_bytes + fwd.total_bytes <= _cap(v) and not ff.over_cap:
            break
        reserve = _size_forward(v, des, ff, 0.0).total_bytes  # the fewest forward bytes with these
        if reserve in reserves:
            break
        reserves.add(reserve)
        if not _another(pairs, pair, _cap(v) - reserve):
            break
    total = lambda p: p[0].total_bytes + p[1].total_bytes  # noqa: E731
    if all(total(p) > _cap(v) for p in pairs):
        _another(pairs, pair, 0.0)  # fewest feed-forward bytes: fits whenever sizing = "bytes" would
    within = [p for p in pairs if total(p) <= _cap(v)]
    return min(within, key=lambda p: (p[0].instructions, total(p))) if within else min(pairs, key=total)


_RESIZE_ROUNDS = 4  # feed-forward re-sizings under a shrinking room before the cap is given up


def _another(pairs: list[Any], pair: Callable[[float], Any], room: float) -> bool:
    """Append the pair sized under `room`; False when nothing there costs less than the ceiling (the
    pairs already found stay: one of them may fit the cap)."""
    try:
        pairs.append(pair(room))
    except sizing.NotCheaper:
        return False
    return True


def _cap(v: Vehicle) -> float:
    """The byte cap on all tables: firmware.table_bytes_max under the instructions objective, else none."""
    return v.firmware.table_bytes_max if v.firmware.sizing == "instructions" else math.inf


def _wheels_goal(v: Vehicle) -> float:
    """The forward tables' goal, m/s^2: the accel budget, tightened when the look-ahead point's form is
    generated so that it meets the budget too (its sideways rate carries d/(2b) times the difference of
    the wheels' errors, plus about one step of rounding: pointform.point_form states the exact bound)."""
    goal = forward_budget(v)
    ahead = v.firmware.point_ahead_m
    if ahead is None:
        return goal
    gain = max(1.0, abs(ahead) / v.wheels.track_m * 2)
    return min(goal, (goal - 1.5 * v.firmware.accel_lsb_mps2) / gain)


def _forward_only(des: program.Design) -> list[str]:
    """The tables only the forward helper looks up (M^-1, the back-driving reciprocal), in spec order."""
    used = {op_table(op) for op in des.feedforward.ops}
    wanted = {op_table(op) for op in des.forward.ops}
    return [n for n in des.specs if n in wanted and n not in used]


def _size(program_: program.Program, des: program.Design, names: list[str], budget: float, **kw: Any) -> sizing.Sizing:
    try:
        return sizing.size(program_, des.specs, names, budget, **kw)
    except CheckFailed as exc:
        raise _Missed(exc, forward=program_ is des.forward) from None


def _size_forward(v: Vehicle, des: program.Design, ff: sizing.Sizing, room: float) -> sizing.Sizing:
    """The M^-1 tables with the feed-forward tables fixed, within `room` bytes when minimising
    instructions (fewest bytes when room is too small, flagged over_cap)."""
    goal = _wheels_goal(v)
    objective = (
        sizing.Objective(v.firmware.sizing, max(room, 0.0)) if v.firmware.sizing == "instructions" else sizing.BYTES
    )
    return _size(
        des.forward,
        des,
        _forward_only(des),
        goal / v.firmware.accel_lsb_mps2,
        fixed=ff.tables,
        fixed_errors=ff.errors,
        what=f"forward dynamics {goal:.4g} m/s^2",
        objective=objective,
    )


def sizing_note(fw: Firmware) -> str:
    """What the table sizing minimised, and whether the byte cap had to give way (build line, report)."""
    f = fw.vehicle.firmware
    if f.sizing == "bytes":
        return "sized for fewest table bytes"
    if fw.over_cap:
        return (
            f"firmware.table_bytes_max = {f.table_bytes_max:g} is less than the budget needs: the tables take "
            f"{fw.total_bytes} bytes, sized for fewest bytes where the cap fell short"
        )
    return f"sized for fewest lookup instructions within {f.table_bytes_max:g} table bytes"


def products_note(fw: Firmware) -> str:
    """How many products need a 64-bit multiply, and why (for the build line and the report)."""
    names = fw.products64()
    if not names:
        return "no 64-bit multiplies"
    if fw.rounded_best_a is not None:
        why = (
            f"the budget needs full-precision products (with rounded operands the best bound is "
            f"{fw.rounded_best_a * 1000:.3f} mA)"
        )
    else:
        why = "no exact 32-bit form exists for them"
    mixed = [op.dst for op in fw.design.feedforward.ops if wide_conversion(op)]
    if mixed and set(names) <= set(mixed):
        why = (
            "body-frame steps that are not a power-of-two multiple of the wheel steps (docs/physics.md, "
            "'Body-frame inputs'): their conversion to wheel steps takes two 64-bit products per wheel"
        )
    return f"{len(names)} 64-bit multiplies ({', '.join(names)}): {why}"


def best_bound_a(v: Vehicle, *, exact: bool = True, coarse: bool = False) -> float:
    """The smallest proven feed-forward bound any table sizes reach for this vehicle, A (every piece at
    its most accurate candidate, products exact unless told, tables at full precision unless told):
    what a budget must allow at least."""
    des = program.design(v, exact=exact, coarse=coarse)
    names = [n for n in des.specs if n not in _forward_only(des)]
    pieces = sizing.pieces_to_size(des.specs, names)
    achievable, _ = sizing.limiting_table(analysis.compile_bound(des.feedforward, des.specs), pieces, {})
    return achievable * v.firmware.current_lsb_a


def levers(v: Vehicle) -> str:
    """What makes a budget reachable, each with the best bound it gives (cheap: no search)."""
    fw = v.firmware
    finer = dataclasses.replace(v, firmware=dataclasses.replace(fw, current_lsb_a=fw.current_lsb_a / 4))
    parts = [
        f"a budget of at least {best_bound_a(v):.3g} A",
        f"firmware.current_lsb = {finer.firmware.current_lsb_a:g} A (best bound {best_bound_a(finer):.3g} A)",
    ]
    if fw.word == "int16":
        wider = dataclasses.replace(v, firmware=dataclasses.replace(fw, word="int32"))
        parts.append(f'firmware.word = "int32" (best bound {best_bound_a(wider):.3g} A)')
    return "levers: " + "; ".join(parts)


def firmware_inputs(v: Vehicle, op: dynamics.OperatingPoint) -> dict[str, np.ndarray]:
    """SI operating point(s) -> feed-forward inputs in firmware steps (round to nearest, ties up);
    ValueError names an input beyond the firmware's int32 steps."""
    si = {f.name: getattr(op, f.name) for f in dataclasses.fields(op)}
    return interface.to_steps(v, interface.ff_in(v), si)
