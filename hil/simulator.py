"""The simulated controller: the generated link and feed-forward C (compiled for this host) driving a
simulated vehicle, served on a pseudo-terminal so the bench runs end to end without hardware.

The controller owns the clock: it ticks every period in wall-clock time, like a timer interrupt.
Link faults (dropped, corrupted, delayed or extra bytes) can be injected for tests.
"""

from __future__ import annotations

import os
import select
import sys
import time
import tty
from collections import deque
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from kinetab.generator.synthesis import Firmware
from kinetab.generator.vehicle import Vehicle

from . import framing, messages
from .liftplant import LiftPlant
from .plant import Plant, PlantOptions
from .simfirmware import SimFirmware
from .stepdrive import LiftStepDrive, StepDrive

CATCH_UP_S = 0.005
"""After this process stalls (a loaded machine), resume ticking rather than run the missed ticks in a
burst: a real controller never stalls, and a burst drains the FIFO faster than any controller would
(the likely cause of one "fifo dry" on a loaded CI machine, with 50 ms allowed). A stalled
simulation runs slow instead."""


@dataclass(frozen=True)
class LinkFaults:
    """Faults injected into the byte streams (probabilities per byte; times in seconds)."""

    drop_rate: float = 0.0
    corrupt_rate: float = 0.0
    delay_s: float = 0.0  # every byte to the controller is held this long
    garbage_every_s: float = 0.0  # a burst of random bytes both ways at this interval
    seed: int = 7


@dataclass
class _Stream:
    """One direction of the link with its faults applied."""

    faults: LinkFaults
    rng: np.random.Generator
    delayed: deque[tuple[float, bytes]] = field(default_factory=deque)

    def push(self, data: bytes, now: float, delay: float) -> None:
        f = self.faults
        out = bytearray()
        for byte in data:
            if f.drop_rate and self.rng.random() < f.drop_rate:
                continue
            if f.corrupt_rate and self.rng.random() < f.corrupt_rate:
                byte ^= 1 << int(self.rng.integers(0, 8))
            out.append(byte)
        if out:
            self.delayed.append((now + delay, bytes(out)))

    def pop(self, now: float) -> bytes:
        out = bytearray()
        while self.delayed and self.delayed[0][0] <= now:
            out += self.delayed.popleft()[1]
        return bytes(out)


def open_port() -> tuple[int, int, str]:
    """A pseudo-terminal in raw mode: (controller-side fd, host-side fd kept open, host-side path)."""
    master, slave = os.openpty()
    tty.setraw(master)
    tty.setraw(slave)
    os.set_blocking(master, False)
    return master, slave, os.ttyname(slave)


class Simulator:
    """One simulated controller session on a pseudo-terminal."""

    def __init__(
        self,
        fw: Firmware,
        truth: Vehicle,
        *,
        options: PlantOptions,
        faults: LinkFaults,
        fifo_depth: int,
        folder: Path,
        watchdog_s: float = 0.1,
    ) -> None:
        self.fw, self.options, self.faults = fw, options, faults
        self.period_us = round(options.period_s * 1e6)
        ticks = max(1, round(watchdog_s / options.period_s))
        self.firmware = SimFirmware(fw, folder, period_us=self.period_us, fifo_depth=fifo_depth, watchdog_ticks=ticks)
        self.drive = StepDrive(fw, Plant(truth=truth, options=options))
        self.lift = LiftStepDrive(fw, LiftPlant.of(truth, options)) if fw.vehicle.lift and truth.lift else None
        rng = np.random.default_rng(faults.seed)
        self.to_controller, self.to_host = _Stream(faults, rng), _Stream(faults, rng)
        self.reader = framing.FrameReader()  # our own transmissions, to report why we halted
        self.halt: messages.Fault | None = None
        self.master, self.slave, self.path = open_port()
        self._next_garbage = 0.0

    def run(self, *, linger_s: float = 1.0, announce: bool = True) -> int:
        """Serve until a halt, then linger at least linger_s and while the controller still repeats the
        halt's fault message (the host has not answered), so the host can read it; 0 when the plan
        ended or the host halted, 1 on any other halt."""
        if announce:
            print(self.path, flush=True)
        next_tick = time.perf_counter()
        halted_at = None
        while halted_at is None or time.perf_counter() - halted_at < linger_s or self.firmware.status().repeats:
            now = time.perf_counter()
            self._io(now)
            if now >= next_tick:
                self._tick()
                next_tick += self.options.period_s
                next_tick = max(next_tick, now - CATCH_UP_S)
                if self.halt is not None and halted_at is None:
                    halted_at = now
                    self._say_halt()
            self._wait(next_tick)
        return 0 if self.halt is not None and self.halt.code in (messages.FaultCode.END, messages.FaultCode.HALT) else 1

    def _io(self, now: float) -> None:
        try:
            data = os.read(self.master, 65536)
        except (BlockingIOError, OSError):
            data = b""
        if data:
            self.to_controller.push(data, now, self.faults.delay_s)
        if self.faults.garbage_every_s and now >= self._next_garbage:
            self._next_garbage = now + self.faults.garbage_every_s
            junk = bytes(self.to_host.rng.integers(0, 256, 24, dtype=np.uint8))
            self.to_controller.push(junk + b"\x00", now, 0.0)
            self.to_host.push(junk + b"\x00", now, 0.0)
        self.firmware.receive(self.to_controller.pop(now))
        sent = self.firmware.transmit()
        for payload in self.reader.feed(sent):
            msg = messages.decode(payload)
            if isinstance(msg, messages.Fault) and self.halt is None:
                self.halt = msg
        if sent:
            self.to_host.push(sent, now, 0.0)
        out = self.to_host.pop(now)
        while out:
            try:
                out = out[os.write(self.master, out) :]
            except BlockingIOError:
                select.select([], [self.master], [], 0.01)
            except OSError:
                return

    def _tick(self) -> None:
        """One control period: measure the one that ended, let the link C tick, run the vehicle."""
        self.firmware.set_measured(self.drive.measure())
        if self.lift is not None:
            self.firmware.set_lift_measured(self.lift.measure())
        self.firmware.tick()
        count, inputs, ff, halted = self.firmware.applied()
        lifting = self.lift is not None and self.firmware.applied_axis() == "lift"
        self.drive.apply(inputs, ff, halted=halted or count == 0 or lifting)
        if self.lift is not None:
            lift_inputs, lift_ff = self.firmware.applied_lift()
            self.lift.apply(lift_inputs, lift_ff, held=halted or not lifting)

    def _wait(self, deadline: float) -> None:
        timeout = max(0.0, min(deadline - time.perf_counter(), 0.005))
        if self.to_controller.delayed:
            timeout = min(timeout, max(0.0, self.to_controller.delayed[0][0] - time.perf_counter()))
        select.select([self.master], [], [], timeout)

    def _say_halt(self) -> None:
        assert self.halt is not None
        code = messages.FaultCode(self.halt.code).name.lower().replace("_", " ")
        status = self.firmware.status()
        print(
            f"simulated controller halted: {code} (sequence {self.halt.seq}); frames {status.frames_ok} ok, "
            f"dropped {status.drop_crc} crc, {status.drop_length} length, {status.drop_unknown} unknown",
            file=sys.stderr,
            flush=True,
        )
