"""The controller side of the bench link as C: the context of the link template set and its files."""

from __future__ import annotations

from typing import Any

from kinetab.generator import __version__, cformat, cview, interface, render
from kinetab.generator.synthesis import Firmware

from . import framing, messages

FIFO_DEPTH = 64
"""Default setpoint FIFO depth: 64 ms at 1 kHz, three times the longest host stall measured on a
pseudo-terminal (21 ms); 64 x 32 bytes of RAM. Firmware may override it with -D<NAME>_LINK_FIFO_DEPTH."""
PERIOD_US = 1000
WATCHDOG_TICKS = 100
FAULT_REPEATS = 20
"""Times the controller sends a halt's fault message again (one watchdog time apart) until the host
answers: 2 s at the defaults, the host's answer timeout, so one lost frame never fails a run."""


def wire(
    table: dict[messages.MessageType, messages.Layout] = messages.LAYOUT,
    *,
    inputs: interface.Struct = interface.FF_IN,
    ff: interface.Struct = interface.FF_OUT,
    measured: interface.Struct = interface.MEASURED,
) -> dict[str, Any]:
    """Message codes, lengths and every field's byte offset (the type byte at 0), from the layouts."""
    kinds = messages.MessageType
    return {
        "kinds": [(k.name, f"0x{int(k):02X}", 1 + table[k].size) for k in kinds],
        "at": {k.name: table[k].offsets() for k in kinds},
        "wire": {
            "setpoint_inputs": table[kinds.SETPOINT].column_offsets("inputs", inputs),
            "sample_ff": table[kinds.SAMPLE].column_offsets("ff", ff),
            "sample_measured": table[kinds.SAMPLE].column_offsets("measured", measured),
            "lift_setpoint_inputs": table[kinds.LIFT_SETPOINT].column_offsets("inputs", interface.LIFT_IN),
            "lift_sample_ff": table[kinds.LIFT_SAMPLE].column_offsets("ff", interface.LIFT_OUT),
            "lift_sample_measured": table[kinds.LIFT_SAMPLE].column_offsets("measured", interface.LIFT_MEASURED),
        },
    }


def context(
    fw: Firmware, *, period_us: int = PERIOD_US, fifo_depth: int = FIFO_DEPTH, watchdog_ticks: int = WATCHDOG_TICKS
) -> dict[str, Any]:
    """Everything the link templates print; message layouts come from hil.messages."""
    prefix = fw.vehicle.name
    names = interface.file_names(prefix)
    measured = [(m.c_decl().ljust(19), m.c_comment()) for m in interface.MEASURED.members]
    return {
        "prefix": prefix,
        "PREFIX": prefix.upper(),
        "version": __version__,
        "fingerprint": f"0x{fw.fingerprint:08X}u",
        "caution": cview.CAUTION,
        "header": names["link_header"],
        "source": names["link_source"],
        "ff_header": names["ff_header"],
        "guard": f"{prefix.upper()}_LINK_H",
        "protocol": messages.PROTOCOL_VERSION,
        "protocol_min": min(messages.SPOKEN),
        "fifo_depth": fifo_depth,
        "period_us": period_us,
        "watchdog_ticks": watchdog_ticks,
        "fault_repeats": FAULT_REPEATS,
        "max_frame": framing.MAX_FRAME,
        "crc_rows": cformat.rows([f"0x{x:04X}u" for x in framing.crc_table()], per_row=8),
        "fault_codes": [(c.name, int(c)) for c in messages.FaultCode],
        "flag_last": messages.LAST,
        "flag_no_ff": messages.NO_FEEDFORWARD,
        "status_measured": messages.STATUS_MEASURED,
        "status_clamped": messages.STATUS_CLAMPED,
        "status_last": messages.STATUS_LAST,
        "measured": {"ctype": interface.MEASURED.c_type(prefix), "members": measured},
        "setpoint_fields": interface.ff_in(fw.vehicle).lvalues(),
        "ff_fields": interface.FF_OUT.lvalues(),
        "measured_fields": interface.MEASURED.lvalues(),
        "lift": _lift(fw),
        **wire(messages.layouts(inputs=interface.ff_in(fw.vehicle)), inputs=interface.ff_in(fw.vehicle)),
    }


def _lift(fw: Firmware) -> dict[str, Any] | None:
    """What the link templates print for the lift's messages (None: the model has no [lift])."""
    if fw.vehicle.lift is None:
        return None
    prefix = fw.vehicle.name
    members = [(m.c_decl().ljust(19), m.c_comment()) for m in interface.LIFT_MEASURED.members]
    return {
        "measured": {"ctype": interface.LIFT_MEASURED.c_type(prefix), "members": members},
        "setpoint_fields": interface.LIFT_IN.lvalues(),
        "ff_fields": interface.LIFT_OUT.lvalues(),
        "measured_fields": interface.LIFT_MEASURED.lvalues(),
    }


def render_link(
    fw: Firmware, *, period_us: int = PERIOD_US, fifo_depth: int = FIFO_DEPTH, watchdog_ticks: int = WATCHDOG_TICKS
) -> dict[str, str]:
    """`<name>_link.h` and `<name>_link.c`: the controller side, for the same vehicle as its _ff files."""
    ctx = context(fw, period_us=period_us, fifo_depth=fifo_depth, watchdog_ticks=watchdog_ticks)
    return render.render_set(render.LINK, fw.vehicle.name, ctx)
