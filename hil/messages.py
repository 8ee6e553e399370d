"""The bench-link messages (hil/PROTOCOL.md): one type byte, then little-endian fields.

The setpoint carries the feed-forward inputs and the sample the feed-forward outputs and the
measurements, each packed in the order the interface description gives (generator/interface.py), so
the link and the generated C cannot disagree on the order of the inputs.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass
from enum import IntEnum

from kinetab.generator import interface

PROTOCOL_VERSION = 2  # 2: setpoint flag bit 1 (no feed-forward)


class Kind(IntEnum):
    """Type byte of each message; host to controller below 0x80, controller to host from 0x80."""

    HELLO = 0x01
    ARM = 0x02
    SETPOINT = 0x03
    HALT = 0x04
    IDENTIFY = 0x81
    ARMED = 0x82
    SAMPLE = 0x83
    FAULT = 0x84


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
    inputs: tuple[int, ...]  # interface.FF_IN columns, firmware steps


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
class Fault:
    code: int
    seq: int


Message = Hello | Identify | Arm | Armed | Setpoint | Halt | Sample | Fault

LAYOUT: dict[Kind, tuple[type, str]] = {
    Kind.HELLO: (Hello, "<B"),
    Kind.IDENTIFY: (Identify, "<BIIHH"),
    Kind.ARM: (Arm, "<HH"),
    Kind.ARMED: (Armed, "<HH"),
    Kind.SETPOINT: (Setpoint, f"<HB{N_IN}i"),
    Kind.HALT: (Halt, "<"),
    Kind.SAMPLE: (Sample, f"<HHHBB{N_OUT}i{N_MEAS}i"),
    Kind.FAULT: (Fault, "<BH"),
}
KIND_OF = {cls: kind for kind, (cls, _) in LAYOUT.items()}


def encode(msg: Message) -> bytes:
    """The payload of a message (type byte and fields; the CRC is added by the framing)."""
    kind = KIND_OF[type(msg)]
    fmt = LAYOUT[kind][1]
    match msg:
        case Setpoint():
            fields: tuple[int, ...] = (msg.seq, msg.flags, *msg.inputs)
        case Sample():
            fields = (msg.seq, msg.last_rx, msg.free, msg.status, msg.clamped, *msg.ff, *msg.measured)
        case _:
            fields = tuple(getattr(msg, f) for f in msg.__dataclass_fields__)
    return bytes([kind]) + struct.pack(fmt, *fields)


TO_CONTROLLER = frozenset({Kind.HELLO, Kind.ARM, Kind.SETPOINT, Kind.HALT})
TO_HOST = frozenset({Kind.IDENTIFY, Kind.ARMED, Kind.SAMPLE, Kind.FAULT})


def decode(payload: bytes, kinds: frozenset[Kind] = TO_HOST) -> Message | str:
    """A message of one of `kinds` (what this side receives), or the cause it is dropped for:
    "unknown_type" or "length". Never raises."""
    if not payload or payload[0] not in {int(k) for k in kinds}:
        return "unknown_type"
    kind = Kind(payload[0])
    cls, fmt = LAYOUT[kind]
    if len(payload) - 1 != struct.calcsize(fmt):
        return "length"
    values = struct.unpack(fmt, payload[1:])
    if cls is Setpoint:
        return Setpoint(values[0], values[1], tuple(values[2:]))
    if cls is Sample:
        seq, last_rx, free, status, clamped = values[:5]
        return Sample(seq, last_rx, free, status, clamped, tuple(values[5 : 5 + N_OUT]), tuple(values[5 + N_OUT :]))
    msg: Message = cls(*values)
    return msg
