"""The bench-link messages (hil/PROTOCOL.md): one type byte, then little-endian fields.

The setpoint carries the feed-forward inputs and the sample the feed-forward outputs and the
measurements, each packed in the order the interface description gives (generator/interface.py), so
the link and the generated C cannot disagree on the order of the inputs.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass
from enum import IntEnum
from typing import cast

from kinetab.generator import interface

PROTOCOL_VERSION = 3  # 2: setpoint flag bit 1 (no feed-forward); 3: the lift's setpoint and sample
SPOKEN = (2, 3)
"""Versions this host speaks: 3 only adds the lift's messages, so a version-2 controller still runs drive plans."""
LIFT_VERSION = 3  # the first version with the lift's messages


class MessageType(IntEnum):
    """Type byte of each message; host to controller below 0x80, controller to host from 0x80."""

    HELLO = 0x01
    ARM = 0x02
    SETPOINT = 0x03
    HALT = 0x04
    LIFT_SETPOINT = 0x05
    IDENTIFY = 0x81
    ARMED = 0x82
    SAMPLE = 0x83
    FAULT = 0x84
    LIFT_SAMPLE = 0x85


class FaultCode(IntEnum):
    """Why the controller halted the motors (every halt is reported with one of these)."""

    END = 0  # the setpoint flagged last was done: the plan is complete
    HALT = 1  # the host asked
    FIFO_DRY = 2  # a tick found no setpoint
    WATCHDOG = 3  # no valid frame within the watchdog time
    SEQUENCE = 4  # reserved (out-of-sequence setpoints are ignored and sent again, not a halt)
    OVERFLOW = 5  # a setpoint arrived with the FIFO full
    FIRMWARE = 6  # the firmware's measure hook reported a failure
    NOT_ARMED = 7  # a setpoint while not armed


LAST = 0x01  # setpoint flag: the final setpoint of the plan
NO_FEEDFORWARD = 0x02  # setpoint flag: apply no feed-forward current (the wheels-up rig; the sample reports 0)
STATUS_MEASURED = 0x01  # sample status: the measurement is valid
STATUS_CLAMPED = 0x02  # sample status: the feed-forward clamped an input (see `clamped`)
STATUS_LAST = 0x04  # sample status: the sample of the last setpoint

N_IN = len(interface.FF_IN.columns)
N_OUT = len(interface.FF_OUT.columns)
N_MEAS = len(interface.MEASURED.columns)


@dataclass(frozen=True)
class Hello:
    version: int = PROTOCOL_VERSION


@dataclass(frozen=True)
class Identify:
    version: int
    fingerprint: int
    period_us: int
    fifo_depth: int
    watchdog_ms: int


@dataclass(frozen=True)
class Arm:
    first_seq: int
    prefill: int


@dataclass(frozen=True)
class Armed:
    first_seq: int
    free: int


@dataclass(frozen=True)
class Setpoint:
    seq: int
    flags: int
    inputs: tuple[int, ...]  # the vehicle's feed-forward input columns (interface.ff_in), firmware steps


@dataclass(frozen=True)
class Halt:
    pass


@dataclass(frozen=True)
class Sample:
    seq: int  # the setpoint this sample measured
    last_rx: int  # the newest setpoint sequence number the controller has received
    free: int  # free FIFO slots
    status: int
    clamped: int
    ff: tuple[int, ...]  # interface.FF_OUT columns (current steps)
    measured: tuple[int, ...]  # interface.MEASURED columns (current steps, speed steps)


@dataclass(frozen=True)
class LiftSetpoint:
    seq: int
    flags: int
    inputs: tuple[int, ...]  # interface.LIFT_IN columns, the lift's firmware steps


@dataclass(frozen=True)
class LiftSample:
    seq: int
    last_rx: int
    free: int
    status: int
    clamped: int
    ff: tuple[int, ...]  # interface.LIFT_OUT columns (lift current steps)
    measured: tuple[int, ...]  # interface.LIFT_MEASURED columns (lift current steps, lift speed steps)


@dataclass(frozen=True)
class Fault:
    code: int
    seq: int


Message = Hello | Identify | Arm | Armed | Setpoint | Halt | Sample | Fault | LiftSetpoint | LiftSample

WIDTH = {"u8": "B", "u16": "H", "u32": "I", "i32": "i"}
"""Wire type -> struct code (little-endian, no padding)."""


@dataclass(frozen=True)
class Field:
    """One field of a message: the dataclass attribute it fills, its wire type and, for a run of
    struct columns (a tuple attribute), the interface columns in order."""

    name: str
    wire: str  # "u8", "u16", "u32" or "i32"
    columns: tuple[str, ...] = ()

    @property
    def count(self) -> int:
        return len(self.columns) or 1

    @property
    def size(self) -> int:
        return self.count * struct.calcsize("<" + WIDTH[self.wire])


@dataclass(frozen=True)
class Layout:
    """A message's dataclass and its fields after the type byte, in wire order."""

    cls: type
    fields: tuple[Field, ...]

    @property
    def fmt(self) -> str:
        return "<" + "".join(f"{f.count}{WIDTH[f.wire]}" if f.columns else WIDTH[f.wire] for f in self.fields)

    @property
    def size(self) -> int:
        """Payload bytes after the type byte."""
        return struct.calcsize(self.fmt)

    def column_offsets(self, name: str, st: interface.Struct) -> list[tuple[str, int]]:
        """(C lvalue in the struct, byte offset in the message) of each column of the field that carries `st`."""
        f = next(f for f in self.fields if f.name == name)
        assert f.columns == st.columns, f"{name} carries {st.tag}'s columns in its order"
        step = f.size // f.count
        return [(lv, self.offsets()[name] + step * k) for k, lv in enumerate(st.lvalues())]

    def offsets(self) -> dict[str, int]:
        """Byte offset of each field in the payload, the type byte at 0."""
        out, at = {}, 1
        for f in self.fields:
            out[f.name] = at
            at += f.size
        return out


def _setpoint(cls: type, inputs: interface.Struct) -> Layout:
    return Layout(cls, (Field("seq", "u16"), Field("flags", "u8"), Field("inputs", "i32", inputs.columns)))


def _sample(cls: type, ff: interface.Struct, measured: interface.Struct) -> Layout:
    return Layout(
        cls,
        (
            Field("seq", "u16"),
            Field("last_rx", "u16"),
            Field("free", "u16"),
            Field("status", "u8"),
            Field("clamped", "u8"),
            Field("ff", "i32", ff.columns),
            Field("measured", "i32", measured.columns),
        ),
    )


def layouts(
    inputs: interface.Struct = interface.FF_IN,
    ff: interface.Struct = interface.FF_OUT,
    measured: interface.Struct = interface.MEASURED,
) -> dict[MessageType, Layout]:
    """Every message's layout; the setpoints and samples carry the columns of the interface structs
    (the lift's: interface.LIFT_IN, LIFT_OUT and LIFT_MEASURED)."""
    return {
        MessageType.HELLO: Layout(Hello, (Field("version", "u8"),)),
        MessageType.IDENTIFY: Layout(
            Identify,
            (
                Field("version", "u8"),
                Field("fingerprint", "u32"),
                Field("period_us", "u32"),
                Field("fifo_depth", "u16"),
                Field("watchdog_ms", "u16"),
            ),
        ),
        MessageType.ARM: Layout(Arm, (Field("first_seq", "u16"), Field("prefill", "u16"))),
        MessageType.ARMED: Layout(Armed, (Field("first_seq", "u16"), Field("free", "u16"))),
        MessageType.SETPOINT: _setpoint(Setpoint, inputs),
        MessageType.HALT: Layout(Halt, ()),
        MessageType.LIFT_SETPOINT: _setpoint(LiftSetpoint, interface.LIFT_IN),
        MessageType.SAMPLE: _sample(Sample, ff, measured),
        MessageType.FAULT: Layout(Fault, (Field("code", "u8"), Field("seq", "u16"))),
        MessageType.LIFT_SAMPLE: _sample(LiftSample, interface.LIFT_OUT, interface.LIFT_MEASURED),
    }


LAYOUT = layouts()
"""Every message on the wire, described once: the codecs below, the link C (hil/linkview.py) and the
tables of PROTOCOL.md (checked by tests/test_framing.py) all read it."""
KIND_OF = {layout.cls: kind for kind, layout in LAYOUT.items()}


def pack(layout: Layout, msg: object) -> bytes:
    """The fields of `msg` in `layout`'s wire order (after the type byte)."""
    values: list[int] = []
    for f in layout.fields:
        value = getattr(msg, f.name)
        values += list(value) if f.columns else [value]
    return struct.pack(layout.fmt, *values)


def unpack(layout: Layout, body: bytes) -> object:
    """The message `layout` describes from its fields (after the type byte; the length already checked)."""
    values = struct.unpack(layout.fmt, body)
    fields: dict[str, object] = {}
    at = 0
    for f in layout.fields:
        fields[f.name] = tuple(values[at : at + f.count]) if f.columns else values[at]
        at += f.count
    return layout.cls(**fields)


def encode(msg: Message) -> bytes:
    """The payload of a message (type byte and fields; the CRC is added by the framing)."""
    kind = KIND_OF[type(msg)]
    return bytes([kind]) + pack(LAYOUT[kind], msg)


TO_CONTROLLER = frozenset(k for k in MessageType if k < 0x80)
TO_HOST = frozenset(k for k in MessageType if k >= 0x80)


def decode(payload: bytes, kinds: frozenset[MessageType] = TO_HOST) -> Message | str:
    """A message of one of `kinds` (what this side receives), or the cause it is dropped for:
    "unknown_type" or "length". Never raises."""
    if not payload or payload[0] not in {int(k) for k in kinds}:
        return "unknown_type"
    kind = MessageType(payload[0])
    layout = LAYOUT[kind]
    if len(payload) - 1 != layout.size:
        return "length"
    return cast(Message, unpack(layout, payload[1:]))  # layout.cls is one of the Message classes
