"""The reference firmware on an emulated board, served like the host simulation: the project built with
arm-none-eabi-gcc, run on qemu-system-arm with the bench link on a pseudo-terminal, and the simulated
drive (hil/stepdrive.py, the same physics as the host simulation) answering the firmware's drive UART
over a Unix socket, one control period per command (hil/drivewire.py)."""

from __future__ import annotations

import re
import select
import shutil
import socket
import subprocess
import time
from dataclasses import dataclass, field
from pathlib import Path

from kinetab.generator import outputs
from kinetab.generator.errors import InternalError, UserError
from kinetab.generator.synthesis import Firmware

from . import drivewire, firmwareview
from .boards import Board
from .session import BenchFailed
from .stepdrive import StepDrive

TOOLS = {"arm-none-eabi-gcc": "gcc-arm-none-eabi", "make": "make", "qemu-system-arm": "qemu-system-arm"}
"""Each program the emulated board needs -> the Debian package that installs it."""
START_TIMEOUT_S = 30.0
"""How long the emulator may take to open its pseudo-terminal and connect the drive UART."""


def check_tools(command: str) -> None:
    """A UserError naming the Debian package of the first program missing from PATH."""
    for tool, package in TOOLS.items():
        if shutil.which(tool) is None:
            raise UserError(f"{command}: {tool} not found on PATH; install the Debian package {package}")


@dataclass(frozen=True, kw_only=True)
class Build:
    """How the firmware is built: the link's settings and the folder its project is written into."""

    period_us: int
    fifo_depth: int
    watchdog_ticks: int
    folder: Path


@dataclass(frozen=True)
class Built:
    """The firmware's ELF and its sizes in bytes, as arm-none-eabi-size reports them."""

    elf: Path
    text: int
    data: int
    bss: int

    def report(self) -> str:
        """Flash holds the code, constants and the initial .data; RAM .data, .bss and the stack."""
        return (
            f"built {self.elf.name}: flash {self.text + self.data} bytes, RAM {self.data + self.bss} bytes "
            f"static + {firmwareview.STACK_BYTES} stack"
        )


SIZE_LINE = re.compile(r"^\s*(\d+)\s+(\d+)\s+(\d+)\s+\d+\s+[0-9a-fA-F]+\s+\S+\.elf\s*$", re.M)
"""arm-none-eabi-size's Berkeley line (text data bss dec hex file), which the Makefile prints."""


def build(fw: Firmware, board: Board, spec: Build) -> Built:
    """Write the reference firmware project into spec.folder and build it with its own Makefile."""
    files = firmwareview.render_project(
        fw,
        board,
        period_us=spec.period_us,
        fifo_depth=spec.fifo_depth,
        watchdog_ticks=spec.watchdog_ticks,
        model_path=(spec.folder / "model.toml").as_posix(),
    )
    outputs.write_set({spec.folder / name: text for name, text in files.items()})
    done = subprocess.run(["make", "-s", "-C", str(spec.folder)], capture_output=True, text=True, check=False)
    if done.returncode != 0:
        last = (done.stderr.strip() or done.stdout.strip() or "no output").splitlines()[-1]
        raise InternalError(f"the generated firmware did not build with arm-none-eabi-gcc: {last}")
    sizes = SIZE_LINE.search(done.stdout)
    if sizes is None:
        raise InternalError(f"the firmware build printed no size line: {done.stdout.strip()[-200:]}")
    text, data, bss = (int(x) for x in sizes.groups())
    return Built(elf=spec.folder / f"{fw.vehicle.name}.elf", text=text, data=data, bss=bss)


@dataclass
class DrivePeer:
    """The simulated drive on the host end of the firmware's drive UART: each COMMAND advances the
    vehicle one period and is answered by a READING of that period."""

    drive: StepDrive
    conn: socket.socket
    pending: bytearray = field(default_factory=bytearray)
    commands: int = 0
    bad_frames: int = 0
    late_ticks: int = 0  # the firmware's latest figures (drivewire.Command)
    stack_bytes: int = 0

    def serve(self, timeout_s: float) -> bool:
        """Answer what arrives within timeout_s; False once the emulator has closed the socket."""
        if not select.select([self.conn], [], [], timeout_s)[0]:
            return True
        data = self.conn.recv(65536)
        if not data:
            return False
        self.pending += data
        *frames, rest = bytes(self.pending).split(b"\x00")
        self.pending = bytearray(rest)
        replies = b"".join(self._answer(f) for f in frames if f)
        if replies:
            self.conn.sendall(replies)
        return True

    def _answer(self, encoded: bytes) -> bytes:
        """The READING that answers one COMMAND frame (the vehicle advanced one period), or nothing."""
        msg = drivewire.decode(encoded)
        if not isinstance(msg, drivewire.Command):
            self.bad_frames += 1
            return b""
        self.commands += 1
        self.late_ticks, self.stack_bytes = msg.late_ticks, msg.stack_bytes
        self.drive.apply(msg.inputs, msg.ff, halted=msg.halted != 0)
        return drivewire.frame(drivewire.Reading(tick=msg.tick, measured=self.drive.measure()))


class EmulatedBoard:
    """qemu-system-arm running the firmware: UART0 on a pseudo-terminal (its path in `port`), UART1
    connected to the simulated drive. Close it to stop the emulator (also on Ctrl-C). qemu's own output
    goes to a file in `folder`, so it can never block on a full pipe."""

    def __init__(self, board: Board, elf: Path, drive: StepDrive, folder: Path) -> None:
        sock_path, self.out_path = folder / "drive.sock", folder / "qemu.out"
        args = ["qemu-system-arm", "-machine", board.qemu_machine, "-display", "none", "-monitor", "none"]
        args += ["-serial", "pty", "-serial", f"unix:{sock_path}", "-kernel", str(elf)]
        self.proc: subprocess.Popen[bytes] | None = None
        self.peer: DrivePeer | None = None
        with socket.socket(socket.AF_UNIX, socket.SOCK_STREAM) as listener:
            try:
                listener.bind(str(sock_path))
                listener.listen(1)
                with self.out_path.open("wb") as out:
                    self.proc = subprocess.Popen(args, stdout=out, stderr=subprocess.STDOUT)
                self.port = self._read_port()
                self.peer = DrivePeer(drive=drive, conn=self._accept(listener))
            except BaseException:
                self.close()
                raise

    def _qemu_said(self) -> str:
        """qemu's output so far, one line."""
        return " ".join(self.out_path.read_text(errors="replace").split()) or "no output"

    def _read_port(self) -> str:
        """The pseudo-terminal qemu names ("char device redirected to /dev/pts/N (label serial0)")."""
        assert self.proc is not None
        deadline = time.monotonic() + START_TIMEOUT_S
        while time.monotonic() < deadline:
            found = re.search(r"redirected to (/dev/\S+)", self.out_path.read_text(errors="replace"))
            if found:
                return found.group(1)
            if self.proc.poll() is not None:
                break
            time.sleep(0.02)
        raise BenchFailed(f"bench simulate: qemu-system-arm did not open the link port: {self._qemu_said()}")

    def _accept(self, listener: socket.socket) -> socket.socket:
        """The emulator's connection to the drive UART's socket; BenchFailed if it exits or never connects."""
        assert self.proc is not None
        listener.settimeout(0.1)
        deadline = time.monotonic() + START_TIMEOUT_S
        while time.monotonic() < deadline and self.proc.poll() is None:
            try:
                conn, _ = listener.accept()
            except TimeoutError:
                continue
            conn.settimeout(None)
            return conn
        raise BenchFailed(f"bench simulate: qemu-system-arm did not connect the drive UART: {self._qemu_said()}")

    def serve(self) -> int:
        """Drive the vehicle until the emulator exits; its exit code."""
        assert self.proc is not None and self.peer is not None
        while self.peer.serve(0.2):
            if self.proc.poll() is not None:
                break
        return self.proc.wait()

    def health(self) -> str:
        """What the firmware reported over the run: for the closing line."""
        peer = self.peer
        if peer is None:
            return "firmware: never connected its drive UART"
        return (
            f"firmware: {peer.commands} control ticks, {peer.late_ticks} of them late waiting for the drive, "
            f"worst stack {peer.stack_bytes} of {firmwareview.STACK_BYTES} bytes; {peer.bad_frames} bad drive frames"
        )

    def close(self) -> None:
        """Stop the emulator and wait for it: no process is left behind."""
        if self.proc is not None:
            if self.proc.poll() is None:
                self.proc.kill()
            self.proc.wait()
        if self.peer is not None:
            self.peer.conn.close()
