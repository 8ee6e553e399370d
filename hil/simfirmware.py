"""The generated feed-forward and link C, compiled for this host and loaded with ctypes: the firmware
half of the simulated controller, running the same files a drive controller runs."""

from __future__ import annotations

import ctypes
from dataclasses import dataclass, field, fields
from pathlib import Path

from kinetab.generator import hostc, interface, render
from kinetab.generator.synthesis import Firmware

from . import linkview

N_IN = len(interface.FF_IN.columns)
N_OUT = len(interface.FF_OUT.columns)
N_MEAS = len(interface.MEASURED.columns)
N_LIFT_IN = len(interface.LIFT_IN.columns)
N_LIFT_MEAS = len(interface.LIFT_MEASURED.columns)
STATE_NAMES = ("idle", "armed", "running", "halted")
TX_SIZE = 8192
"""Bytes the glue buffers between two transmit drains (`SIM_TX_SIZE` in the C; more are counted as lost)."""


@dataclass(frozen=True)
class LinkStatus:
    """The link's state and counters, read from the C: each field names the C expression that
    `sim_status` copies into it (the glue template loops over these, the reader takes them by name)."""

    state: str = field(metadata={"c": "sim_link.state"})
    fifo_count: int = field(metadata={"c": "sim_link.count"})
    frames_ok: int = field(metadata={"c": "sim_link.frames_ok"})
    drop_crc: int = field(metadata={"c": "sim_link.drop_crc"})
    drop_length: int = field(metadata={"c": "sim_link.drop_length"})
    drop_unknown: int = field(metadata={"c": "sim_link.drop_unknown"})
    tx_lost: int = field(metadata={"c": "sim_tx_lost"})
    drop_order: int = field(metadata={"c": "sim_link.drop_order"})
    repeats: int = field(metadata={"c": "sim_link.repeats"})  # a halt's fault messages still to send again


STATUS_C = [(f.name, f.metadata["c"]) for f in fields(LinkStatus)]


def sources(
    fw: Firmware, *, period_us: int, fifo_depth: int, watchdog_ticks: int = linkview.WATCHDOG_TICKS
) -> dict[str, str]:
    """Every C file of the simulated controller: feed-forward, link and the hook glue."""
    files = dict(render.render(fw))
    shape = {"period_us": period_us, "fifo_depth": fifo_depth, "watchdog_ticks": watchdog_ticks}
    files.update(linkview.render_link(fw, **shape))
    ctx = linkview.context(fw, **shape)
    ctx.update(
        source=interface.file_names(fw.vehicle.name)["sim_source"],
        link_header=interface.file_names(fw.vehicle.name)["link_header"],
        measured_type=interface.MEASURED.c_type(fw.vehicle.name),
        tx_size=TX_SIZE,
        status=STATUS_C,
    )
    files.update(render.render_set(render.SIM, fw.vehicle.name, ctx))
    return files


class SimFirmware:
    """The compiled library: feed it received bytes, tick it, take what it transmits."""

    def __init__(
        self,
        fw: Firmware,
        folder: Path,
        *,
        period_us: int,
        fifo_depth: int,
        watchdog_ticks: int = linkview.WATCHDOG_TICKS,
        defines: tuple[str, ...] = (),
    ) -> None:
        names = interface.file_names(fw.vehicle.name)
        for name, text in sources(
            fw, period_us=period_us, fifo_depth=fifo_depth, watchdog_ticks=watchdog_ticks
        ).items():
            (folder / name).write_text(text, encoding="utf-8")
        c_files = [folder / names[k] for k in ("ff_source", "link_source", "sim_source")]
        lib = hostc.compile_c(
            c_files, folder / "libsimfw.so", include=[folder], defines=defines, extra=["-shared", "-fPIC"]
        )
        self.lib = ctypes.CDLL(str(lib))
        self.lib.sim_tx_take.restype = ctypes.c_uint32
        self.lib.sim_applied.restype = ctypes.c_uint32
        self._tx = ctypes.create_string_buffer(TX_SIZE)
        self._inputs = (ctypes.c_int32 * N_IN)()
        self._ff = (ctypes.c_int32 * N_OUT)()
        self._halted = ctypes.c_int()
        self._status = (ctypes.c_uint32 * len(STATUS_C))()
        self._lift_in = (ctypes.c_int32 * N_LIFT_IN)()
        self._lift_ff = (ctypes.c_int32 * len(interface.LIFT_OUT.columns))()
        self.lib.sim_init()

    def receive(self, data: bytes) -> None:
        if data:
            self.lib.sim_rx(data, ctypes.c_uint32(len(data)))

    def tick(self) -> None:
        self.lib.sim_tick()

    def transmit(self) -> bytes:
        n = self.lib.sim_tx_take(self._tx, ctypes.c_uint32(len(self._tx)))
        return self._tx.raw[:n]

    def applied(self) -> tuple[int, tuple[int, ...], tuple[int, ...], bool]:
        """(count of applies so far, setpoint FF_IN columns, feed-forward FF_OUT columns, halted)."""
        count = self.lib.sim_applied(self._inputs, self._ff, ctypes.byref(self._halted))
        return int(count), tuple(self._inputs), tuple(self._ff), bool(self._halted.value)

    def applied_axis(self) -> str:
        """The axis of the newest applied setpoint: "lift" or "drive"."""
        return "lift" if self.lib.sim_applied_axis() else "drive"

    def applied_lift(self) -> tuple[tuple[int, ...], tuple[int, ...]]:
        """The last applied lift setpoint (LIFT_IN columns) and its feed-forward (LIFT_OUT columns)."""
        self.lib.sim_applied_lift(self._lift_in, self._lift_ff)
        return tuple(self._lift_in), tuple(self._lift_ff)

    def set_lift_measured(self, values: tuple[int, ...]) -> None:
        """What the next lift measure hook returns (LIFT_MEASURED columns in the lift's steps)."""
        self.lib.sim_set_lift_measured((ctypes.c_int32 * N_LIFT_MEAS)(*values))

    def set_measured(self, values: tuple[int, ...], *, ok: bool = True) -> None:
        """What the next measure hook returns (MEASURED columns in firmware steps)."""
        arr = (ctypes.c_int32 * N_MEAS)(*values)
        self.lib.sim_set_measured(arr, 0 if ok else 1)

    def status(self) -> LinkStatus:
        self.lib.sim_status(self._status)
        got: dict[str, int] = {name: int(x) for (name, _), x in zip(STATUS_C, self._status)}
        state = got.pop("state")
        return LinkStatus(state=STATE_NAMES[state] if state < len(STATE_NAMES) else str(state), **got)
