"""The firmware interface, described once: the C structs of the feed-forward and forward-dynamics
calls (members, order, C types, physical units, the model key of each member's step, clamp bits),
the C identifiers and the generated file names.

The templates render the structs from this, the golden vectors take their columns from it, the
SI <-> firmware-step conversions and the Cortex-M input packing read it, the programs take their clamp
order, signal names and rates from it, and the bench's plans, logs and messages derive their columns
from it. Nothing else restates the order of the inputs.
"""

from __future__ import annotations

import dataclasses
import math
import struct as _struct
from dataclasses import dataclass
from typing import Any

import numpy as np

from . import bodyframe, dynamics, model, units
from .vehicle import Vehicle

SIDES = ("right", "left")  # index 0 and 1 of every two-wheel member


@dataclass(frozen=True, kw_only=True)
class Member:
    """One struct member: `count` is 2 for a per-wheel pair (right, left), else 1."""

    name: str
    count: int
    what: str  # the physical quantity, for comments
    unit: str  # SI unit of one step's value
    lsb_key: str  # model key of one step ("firmware.speed_lsb")
    limit: str  # Limits field of its envelope edge ("speed")
    edge_key: str  # model key of that edge in SI ("envelope.speed_max")
    signed: bool = True  # False: the envelope is 0..limit (payload)
    si: tuple[str, ...] = ()  # OperatingPoint attributes, one per column
    steps: str = ""  # the name of its firmware step, for comments ("speed steps")
    quantity: units.Kind | None = None  # what a person types for it on the command line
    typed_unit: str = ""  # the unit of a bare number typed for it ("deg" for angles)
    labels: tuple[str, ...] = ()  # per column, for option help ("Right wheel rim speed")
    body: bool = False  # a body-frame input: its step is bodyframe.lsb (the model key or its default)
    slow: bool = False  # changes slowly (an inclination filter at tens of hertz, a payload once per load)
    signal: str = ""  # the programs' name of its clamped value, when not the member's name

    @property
    def value(self) -> str:
        """The programs' signal name of the clamped member (`speed`, `cur`)."""
        return self.signal or self.name

    @property
    def columns(self) -> tuple[str, ...]:
        """Flat column names: `speed_right, speed_left` for a pair, `pitch` for a scalar."""
        return tuple(f"{self.name}_{s}" for s in SIDES) if self.count == 2 else (self.name,)

    def lvalues(self) -> list[str]:
        """The C lvalue of each column inside its struct: `speed[0]`, `speed[1]`, or `pitch`."""
        return [f"{self.name}[{k}]" for k in range(2)] if self.count == 2 else [self.name]

    def c_decl(self) -> str:
        return f"int32_t {self.name}[2];" if self.count == 2 else f"int32_t {self.name};"

    def c_comment(self) -> str:
        return f"{self.what}, {self.steps}"


@dataclass(frozen=True, kw_only=True)
class Struct:
    """A C struct `<prefix>_<tag>_t`; output structs end with `uint32_t clamped` (one bit per input).
    `body`: its motion members are body-frame (forward, yaw), which to_si turns into wheel values."""

    tag: str
    members: tuple[Member, ...]
    clamped: bool = False
    body: bool = False

    @property
    def columns(self) -> tuple[str, ...]:
        return tuple(c for m in self.members for c in m.columns)

    def c_type(self, prefix: str) -> str:
        return f"{prefix}_{self.tag}_t"

    def pack_format(self) -> str:
        """struct-module format of the struct in memory on a little-endian 32-bit target."""
        return "<" + "i" * len(self.columns) + ("I" if self.clamped else "")

    def pack(self, row: Any) -> bytes:
        return _struct.pack(self.pack_format(), *(int(x) for x in row))

    def unpack(self, data: bytes) -> tuple[int, ...]:
        return _struct.unpack(self.pack_format(), data)

    @property
    def size(self) -> int:
        return _struct.calcsize(self.pack_format())

    def lvalues(self) -> list[str]:
        """The C lvalue of each column inside the struct (`speed[0]`, `pitch`), in column order."""
        return [lv for m in self.members for lv in m.lvalues()]

    def si_names(self) -> dict[str, str]:
        """Column -> OperatingPoint attribute ("pitch" -> "pitch_rad"), in struct order."""
        return {c: a for m in self.members for c, a in zip(m.columns, m.si)}

    def member(self, name: str) -> Member:
        return next(m for m in self.members if m.name == name)


SPEED = Member(
    name="speed",
    count=2,
    what="rim speed per wheel",
    unit="m/s",
    lsb_key="firmware.speed_lsb",
    limit="speed",
    edge_key="envelope.speed_max",
    si=("speed_right", "speed_left"),
    steps="speed steps",
    quantity=units.SPEED,
    typed_unit="m/s",
    labels=("Right wheel rim speed", "Left wheel rim speed"),
)
ACCEL = Member(
    name="accel",
    count=2,
    what="rim acceleration per wheel",
    unit="m/s^2",
    lsb_key="firmware.accel_lsb",
    limit="accel",
    edge_key="envelope.accel_max",
    si=("accel_right", "accel_left"),
    steps="accel steps",
    quantity=units.ACCEL,
    typed_unit="m/s**2",
    labels=("Right wheel rim acceleration", "Left wheel rim acceleration"),
)
PITCH = Member(
    name="pitch",
    count=1,
    what="front up > 0",
    unit="rad",
    lsb_key="firmware.angle_lsb",
    limit="pitch",
    edge_key="envelope.pitch_max",
    si=("pitch_rad",),
    steps="angle steps",
    quantity=units.ANGLE,
    typed_unit="deg",
    labels=("Pitch, front up > 0",),
    slow=True,
)
ROLL = Member(
    name="roll",
    count=1,
    what="left side up > 0",
    unit="rad",
    lsb_key="firmware.angle_lsb",
    limit="roll",
    edge_key="envelope.roll_max",
    si=("roll_rad",),
    steps="angle steps",
    quantity=units.ANGLE,
    typed_unit="deg",
    labels=("Roll, left side up > 0",),
    slow=True,
)
PAYLOAD = Member(
    name="payload",
    count=1,
    what="payload mass",
    unit="kg",
    lsb_key="firmware.mass_lsb",
    limit="payload",
    edge_key="payload.mass_max",
    signed=False,
    si=("payload_kg",),
    steps="mass steps",
    quantity=units.MASS,
    typed_unit="kg",
    labels=("Payload mass",),
    slow=True,
)
FORWARD_SPEED = Member(
    name="forward_speed",
    count=1,
    what="speed of P, forward > 0",
    unit="m/s",
    lsb_key="firmware.forward_speed_lsb",
    limit="forward_speed",
    edge_key="envelope.forward_speed_max",
    si=("forward_speed",),
    steps="forward speed steps",
    quantity=units.SPEED,
    typed_unit="m/s",
    labels=("Forward speed of P",),
    body=True,
)
YAW_RATE = Member(
    name="yaw_rate",
    count=1,
    what="yaw rate, turning left > 0",
    unit="rad/s",
    lsb_key="firmware.yaw_rate_lsb",
    limit="yaw_rate",
    edge_key="envelope.yaw_rate_max",
    si=("yaw_rate",),
    steps="yaw rate steps",
    quantity=units.YAW_RATE,
    typed_unit="rad/s",
    labels=("Yaw rate, turning left > 0",),
    body=True,
)
FORWARD_ACCEL = dataclasses.replace(
    FORWARD_SPEED,
    name="forward_accel",
    what="acceleration of P, forward > 0",
    unit="m/s^2",
    lsb_key="firmware.forward_accel_lsb",
    limit="forward_accel",
    edge_key="envelope.forward_accel_max",
    si=("forward_accel",),
    steps="forward accel steps",
    quantity=units.ACCEL,
    typed_unit="m/s**2",
    labels=("Forward acceleration of P",),
)
YAW_ACCEL = dataclasses.replace(
    YAW_RATE,
    name="yaw_accel",
    what="yaw acceleration, turning left > 0",
    unit="rad/s^2",
    lsb_key="firmware.yaw_accel_lsb",
    limit="yaw_accel",
    edge_key="envelope.yaw_accel_max",
    si=("yaw_accel",),
    steps="yaw accel steps",
    quantity=units.YAW_ACCEL,
    typed_unit="rad/s**2",
    labels=("Yaw acceleration, turning left > 0",),
)
BODY_PAIRS = {"speed": (FORWARD_SPEED, YAW_RATE), "accel": (FORWARD_ACCEL, YAW_ACCEL)}
"""The body-frame (forward, yaw) members that stand for each wheel pair."""
CURRENT_IN = Member(
    name="current",
    count=2,
    what="measured motor current per wheel",
    unit="A",
    lsb_key="firmware.current_lsb",
    limit="current",
    edge_key="drive.current_limit",
    steps="current steps",
    signal="cur",
)
CURRENT_OUT = dataclasses.replace(CURRENT_IN, what="feed-forward motor current per wheel")
ACCEL_OUT = Member(
    name="accel",
    count=2,
    what="predicted rim acceleration per wheel",
    unit="m/s^2",
    lsb_key="firmware.accel_lsb",
    limit="accel",
    edge_key="envelope.accel_max",
    steps="accel steps",
)

FF_IN = Struct(tag="ff_in", members=(SPEED, ACCEL, PITCH, ROLL, PAYLOAD))
FF_IN_BODY = Struct(
    tag="ff_in", members=(FORWARD_SPEED, YAW_RATE, FORWARD_ACCEL, YAW_ACCEL, PITCH, ROLL, PAYLOAD), body=True
)
"""The feed-forward inputs with firmware.inputs = 'body' (same size, same clamp-bit count)."""
SLOW_MEMBERS = tuple(m.name for m in FF_IN.members if m.slow)
"""The inputs the slow part of a two-rate program reads (the same in both feed-forward forms)."""
FF_OUT = Struct(tag="ff_out", members=(CURRENT_OUT,), clamped=True)
FWD_IN = Struct(tag="fwd_in", members=(CURRENT_IN, SPEED, PITCH, ROLL, PAYLOAD))
FWD_OUT = Struct(tag="fwd_out", members=(ACCEL_OUT,), clamped=True)
MEASURED = Struct(tag="link_measured", members=(CURRENT_IN, SPEED))
"""What the drive firmware measures for the bench link each tick (motor currents, rim speeds)."""


@dataclass(frozen=True)
class Call:
    """One generated C function with its input and output structs and the prefix of its clamp bits."""

    name: str  # the program's name and the C function's suffix
    inputs: Struct
    outputs: Struct
    clamp_tag: str  # CLAMPED or FWD_CLAMPED

    def clamp_bit(self, column: str) -> int:
        """Bit number of an input column in `clamped`: its position in the input struct."""
        return self.inputs.columns.index(column)

    def clamp_names(self, prefix: str) -> list[tuple[str, int]]:
        """(`<PREFIX>_CLAMPED_SPEED_RIGHT`, mask) per input column, in bit order."""
        return [(f"{prefix.upper()}_{self.clamp_tag}_{c.upper()}", 1 << k) for k, c in enumerate(self.inputs.columns)]


FEEDFORWARD = Call(name="feedforward", inputs=FF_IN, outputs=FF_OUT, clamp_tag="CLAMPED")
FEEDFORWARD_BODY = Call(name="feedforward", inputs=FF_IN_BODY, outputs=FF_OUT, clamp_tag="CLAMPED")
FORWARD = Call(name="forward", inputs=FWD_IN, outputs=FWD_OUT, clamp_tag="FWD_CLAMPED")
CALLS = (FEEDFORWARD, FORWARD)


def feedforward(v: Vehicle) -> Call:
    """The vehicle's feed-forward call: wheel inputs, or body-frame inputs (firmware.inputs)."""
    return FEEDFORWARD_BODY if bodyframe.is_body(v) else FEEDFORWARD


def ff_in(v: Vehicle) -> Struct:
    """The vehicle's feed-forward input struct: what the C takes, the vectors, plans and the wire carry."""
    return feedforward(v).inputs


def calls(v: Vehicle) -> tuple[Call, Call]:
    return feedforward(v), FORWARD


def file_names(prefix: str) -> dict[str, str]:
    """Every generated file name, by template-set role."""
    return {
        "ff_header": f"{prefix}_ff.h",
        "ff_source": f"{prefix}_ff.c",
        "link_header": f"{prefix}_link.h",
        "link_source": f"{prefix}_link.c",
        "sim_source": f"{prefix}_sim.c",
    }


def edges(limits: Any, member: Member) -> tuple[int, int]:
    """The member's envelope in steps, from a `tablespecs.Limits`: (-limit, limit), or (0, limit)."""
    hi = int(getattr(limits, member.limit))
    return (-hi if member.signed else 0), hi


def column_edges(limits: Any, st: Struct) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper envelope edge of every column of the struct, in steps."""
    pairs = [edges(limits, m) for m in st.members for _ in m.columns]
    return np.array([lo for lo, _ in pairs]), np.array([hi for _, hi in pairs])


def lsb(v: Vehicle, member: Member) -> float:
    """SI value of one step of the member."""
    if member.body:
        return bodyframe.lsb(v, member.name)
    result = model.value(v, member.lsb_key)
    assert isinstance(result, float)
    return result


def rows_to_fields(st: Struct, rows: np.ndarray) -> dict[str, np.ndarray]:
    """Rows of flat columns (n, len(columns)) -> {member: (n, 2) or (n,)} as the programs take them."""
    out, k = {}, 0
    for m in st.members:
        out[m.name] = rows[..., k : k + 2] if m.count == 2 else rows[..., k]
        k += m.count
    return out


def fields_to_rows(st: Struct, fields: dict[str, np.ndarray]) -> np.ndarray:
    """The inverse of rows_to_fields: one flat column per struct column."""
    cols = []
    for m in st.members:
        a = np.asarray(fields[m.name])
        cols += [a[..., 0], a[..., 1]] if m.count == 2 else [a]
    return np.stack(cols, axis=-1)


def to_steps(v: Vehicle, st: Struct, si: dict[str, Any]) -> dict[str, np.ndarray]:
    """SI values keyed by OperatingPoint attribute -> firmware steps (round to nearest, ties up).

    A value that does not fit the firmware's int32 raises ValueError naming the column. A body-frame
    struct takes its values from the wheel ones (with_body)."""
    si = with_body(v, si) if st.body else si
    out = {}
    for m in st.members:
        cols = []
        for attr, col in zip(m.si, m.columns):
            steps = np.floor(np.asarray(si[attr], dtype=float) / lsb(v, m) + 0.5)
            if not np.all(np.abs(steps) <= 2**31 - 1):
                raise ValueError(f"{col}: beyond the firmware's int32 steps ({lsb(v, m):g} {m.unit} per step)")
            cols.append(steps.astype(np.int64))
        out[m.name] = np.stack(cols, -1) if m.count == 2 else cols[0]
    return out


def si_of_fields(st: Struct, fields: dict[str, Any]) -> dict[str, np.ndarray]:
    """SI values by member ({"speed": (n, 2), "pitch": scalar or (n,)}) -> keyed by OperatingPoint attribute."""
    out = {}
    for m in st.members:
        a = np.asarray(fields[m.name], dtype=float)
        for k, attr in enumerate(m.si):
            out[attr] = a[..., k] if m.count == 2 else a
    return out


def to_si(v: Vehicle, st: Struct, steps: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Firmware steps -> SI values keyed by OperatingPoint attribute (exact products; body-frame values
    turned into the wheel values they stand for, dynamics.wheels_from_body)."""
    si = struct_si(v, st, steps)
    return to_wheels(v, si) if st.body else si


def struct_si(v: Vehicle, st: Struct, steps: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Firmware steps -> SI values keyed by the struct's own SI names (body-frame values kept as such)."""
    return si_of_fields(st, {m.name: np.asarray(steps[m.name], dtype=float) * lsb(v, m) for m in st.members})


def with_body(v: Vehicle, si: dict[str, Any]) -> dict[str, Any]:
    """SI values keyed by OperatingPoint attribute, plus the body-frame values of each wheel pair
    (forward_speed, yaw_rate, forward_accel, yaw_accel) unless already there."""
    out = dict(si)
    for pair, (along, turn) in BODY_PAIRS.items():
        if along.si[0] not in out:
            out[along.si[0]], out[turn.si[0]] = dynamics.body_from_wheels(v, si[f"{pair}_right"], si[f"{pair}_left"])
    return out


def to_wheels(v: Vehicle, si: dict[str, Any]) -> dict[str, Any]:
    """The inverse of with_body: body-frame values replaced by the wheel values they stand for."""
    out = dict(si)
    for pair, (along, turn) in BODY_PAIRS.items():
        if along.si[0] in out:
            right, left = dynamics.wheels_from_body(v, out.pop(along.si[0]), out.pop(turn.si[0]))
            out[f"{pair}_right"], out[f"{pair}_left"] = right, left
    return out


def columns_si(v: Vehicle, st: Struct, si: dict[str, Any]) -> dict[str, Any]:
    """SI values keyed by OperatingPoint attribute -> keyed by the struct's columns (a plan file's row)."""
    full = with_body(v, si) if st.body else si
    return {c: full[a] for c, a in st.si_names().items()}


def shown(m: Member) -> tuple[str, Any]:
    """How a person reads the member's values: the unit (as typed on the command line, "deg" for
    angles; SI for outputs) and the conversion from SI."""
    if (m.unit, m.typed_unit) == ("rad", "deg"):
        return "deg", math.degrees
    return (m.typed_unit.replace("**", "^") or m.unit), float


SPEED_DIFFERENCE = "speed_difference"
"""A table source that is no member: u_R - u_L in speed steps (a skid-steer's turning shape)."""


def by_name(name: str) -> Member:
    """The feed-forward input member, or the output current, of that name (a table's source); the speed
    difference counts in the speed's steps and units."""
    if name == SPEED_DIFFERENCE:
        return SPEED
    return next(m for m in (*FF_IN.members, CURRENT_OUT) if m.name == name)


def describe_point(st: Struct, si: dict[str, float], wheel: str, *, digits: int) -> str:
    """One operating point in words, in struct order, values in the units a person types (angles in
    degrees): "right wheel at speed +1.2/-1.2 m/s, ..., payload 60 kg". `si` is keyed by OperatingPoint
    attribute; `digits` significant digits (angles: digits - 1 decimals)."""
    parts = []
    for m in st.members:
        unit, convert = shown(m)
        values = [convert(si[a]) for a in m.si]
        if unit == "deg":
            text = "/".join(f"{x:+.{digits - 1}f}" for x in values)
        else:
            text = "/".join(f"{x:+.{digits}g}" if m.signed else f"{x:.{digits}g}" for x in values)
        parts.append(f"{m.name} {text} {unit}")
    return f"{wheel} wheel at " + ", ".join(parts)


LIFT_SPEED = Member(
    name="speed",
    count=1,
    what="lift carriage speed, up > 0",
    unit="m/s",
    lsb_key="lift.speed_lsb",
    limit="speed",
    edge_key="lift.speed_max",
    si=("speed_mps",),
    steps="lift speed steps",
    quantity=units.SPEED,
    typed_unit="m/s",
    labels=("Lift carriage speed, up > 0",),
)
LIFT_ACCEL = Member(
    name="accel",
    count=1,
    what="lift carriage acceleration, up > 0",
    unit="m/s^2",
    lsb_key="lift.accel_lsb",
    limit="accel",
    edge_key="lift.accel_max",
    si=("accel_mps2",),
    steps="lift accel steps",
    quantity=units.ACCEL,
    typed_unit="m/s**2",
    labels=("Lift carriage acceleration, up > 0",),
)
LIFT_PAYLOAD = Member(
    name="payload",
    count=1,
    what="load on the lift carriage",
    unit="kg",
    lsb_key="lift.mass_lsb",
    limit="payload",
    edge_key="lift.payload_max",
    signed=False,
    si=("payload_kg",),
    steps="lift mass steps",
    quantity=units.MASS,
    typed_unit="kg",
    labels=("Load on the lift carriage",),
)
LIFT_CURRENT = Member(
    name="current",
    count=1,
    what="feed-forward lift motor current",
    unit="A",
    lsb_key="lift.current_lsb",
    limit="current",
    edge_key="lift.current_limit",
    si=("current_a",),
    steps="lift current steps",
)
LIFT_IN = Struct(tag="lift_in", members=(LIFT_SPEED, LIFT_ACCEL, LIFT_PAYLOAD))
LIFT_OUT = Struct(tag="lift_out", members=(LIFT_CURRENT,), clamped=True)
LIFT = Call(name="lift", inputs=LIFT_IN, outputs=LIFT_OUT, clamp_tag="LIFT_CLAMPED")
"""The lift's feed-forward, `<prefix>_lift()`, when the model has a [lift] section (liftfirmware.py)."""
LIFT_CURRENT_IN = dataclasses.replace(LIFT_CURRENT, what="measured lift motor current")
LIFT_MEASURED = Struct(tag="link_lift_measured", members=(LIFT_CURRENT_IN, LIFT_SPEED))
"""What the firmware measures for the bench link each tick of a lift run (lift motor current, carriage
speed); the link carries it only for a model with a [lift] section."""
