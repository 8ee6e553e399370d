"""The drive wire: what the reference firmware on an emulated board exchanges with the simulated drive
on the host, over a second UART standing in for the PWM, the current sensors and the encoders.

Every control tick the firmware sends a COMMAND (the setpoint and feed-forward it applies, or a halt);
the drive advances the vehicle one period and answers with a READING (what it measured over that
period), which the firmware's measure hook reports at the next tick. One type byte, then little-endian
fields, like the bench link (hil/messages.py); each frame is COBS-encoded and ends in a zero byte, without
the link's CRC: the emulator's socket does not corrupt bytes, and the fixed length catches a lost one.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import IntEnum
from typing import Any, cast

from kinetab.generator import interface

from . import framing, messages
from .messages import Field, Layout

TICK_MODULO = 1 << 16
"""The tick counter on the wire is 16 bits and wraps; a reading answers the command of the same tick."""


class DriveType(IntEnum):
    """Type byte of each drive-wire message."""

    COMMAND = 0x41  # firmware to drive
    READING = 0x42  # drive to firmware


@dataclass(frozen=True)
class Command:
    """Firmware to drive, every control tick: what to apply this period, and two health figures."""

    tick: int  # the firmware's control tick, modulo 2^16
    halted: int  # 1: motors off (no setpoint applied this tick)
    inputs: tuple[int, ...]  # the vehicle's feed-forward input columns (interface.ff_in), firmware steps
    ff: tuple[int, ...]  # interface.FF_OUT columns, current steps
    late_ticks: int  # control ticks the firmware so far ran late waiting for the drive's answer
    stack_bytes: int  # the most stack the firmware used so far (its painted stack)


@dataclass(frozen=True)
class Reading:
    """Drive to firmware: what was measured over the period of the command it answers."""

    tick: int  # the command this reading answers
    measured: tuple[int, ...]  # interface.MEASURED columns: current steps, speed steps


def layouts(inputs: interface.Struct = interface.FF_IN) -> dict[DriveType, Layout]:
    """Both messages, described once: the codecs below and the firmware's drive C (hil/firmwareview.py)
    read it; the command carries the vehicle's feed-forward inputs (7 int32 in either form)."""
    return {
        DriveType.COMMAND: Layout(
            Command,
            (
                Field("tick", "u16"),
                Field("halted", "u8"),
                Field("inputs", "i32", inputs.columns),
                Field("ff", "i32", interface.FF_OUT.columns),
                Field("late_ticks", "u32"),
                Field("stack_bytes", "u32"),
            ),
        ),
        DriveType.READING: Layout(
            Reading, (Field("tick", "u16"), Field("measured", "i32", interface.MEASURED.columns))
        ),
    }


LAYOUT = layouts()
"""The byte layout (the same in either input form: the codecs read only sizes and order)."""


def frame(msg: Command | Reading) -> bytes:
    """The wire bytes of one message: COBS(type byte and fields) and the zero delimiter."""
    kind = DriveType.COMMAND if isinstance(msg, Command) else DriveType.READING
    return framing.cobs_encode(bytes([kind]) + messages.pack(LAYOUT[kind], msg)) + b"\x00"


def decode(encoded: bytes) -> Command | Reading | None:
    """The message in one COBS frame (without its delimiter), or None for a damaged or unknown one."""
    payload = framing.cobs_decode(encoded)
    if not payload or payload[0] not in {int(k) for k in DriveType}:
        return None
    layout = LAYOUT[DriveType(payload[0])]
    if len(payload) - 1 != layout.size:
        return None
    return cast(Command | Reading, messages.unpack(layout, payload[1:]))  # layout.cls is one of the two


def c_context(inputs: interface.Struct = interface.FF_IN) -> dict[str, Any]:
    """Type codes, lengths and the byte offset of every field and struct column, for the drive C; the
    command's inputs are the vehicle's feed-forward struct (same size in either form, in its lvalues)."""
    table = layouts(inputs)

    return {
        "command_code": f"0x{int(DriveType.COMMAND):02X}",
        "reading_code": f"0x{int(DriveType.READING):02X}",
        "command_bytes": 1 + table[DriveType.COMMAND].size,
        "reading_bytes": 1 + table[DriveType.READING].size,
        "command_at": table[DriveType.COMMAND].offsets(),
        "reading_at": table[DriveType.READING].offsets(),
        "command_inputs": table[DriveType.COMMAND].column_offsets("inputs", inputs),
        "command_ff": table[DriveType.COMMAND].column_offsets("ff", interface.FF_OUT),
        "reading_measured": table[DriveType.READING].column_offsets("measured", interface.MEASURED),
    }
