"""The reference firmware (`kinetab bench firmware`) on emulated Arm MPS2 boards: the project's own
Makefile builds it with arm-none-eabi-gcc, qemu-system-arm runs it (a real Cortex-M instruction set,
vector table, SysTick and CMSDK UART interrupts), and the bench talks to it over the emulated UART on a
pseudo-terminal. The feed-forward current the firmware computed is checked against the Python emulation
of the same program, row by row (the compiler and the emulator are outside the project).

The emulator delivers host bytes to the CMSDK UART at about 4.5 kB/s (one byte per emulator main-loop
turn, measured with qemu 7.2), so these runs use a 50 ms control period (under 1 kB/s of setpoints)."""

from __future__ import annotations

import csv
import json
import re
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import serial
from kinetab.generator import emulate, interface, model, synthesis
from kinetab.hil import boards, framing, messages, planfile

from tests.helpers import invented_feasible, to_toml

KINETAB = [sys.executable, "-m", "kinetab.generator"]
PERIOD = "50 ms"


def _needs(*tools: str) -> pytest.MarkDecorator:
    missing = [t for t in tools if shutil.which(t) is None]
    return pytest.mark.skipif(bool(missing), reason=f"needs {', '.join(missing)} (apt, see .ci/run)")


needs_qemu = _needs("arm-none-eabi-gcc", "make", "qemu-system-arm")
pytestmark = [pytest.mark.slow]


def _kinetab(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run([*KINETAB, *args], cwd=cwd, capture_output=True, text=True, timeout=300)


@pytest.fixture(scope="module")
def vehicle(tmp_path_factory):
    folder = tmp_path_factory.mktemp("reffw")
    doc, fw = invented_feasible(1803, "tugboat")
    path = folder / "tugboat.toml"
    path.write_text(to_toml(doc), encoding="utf-8")
    assert synthesis.synthesise(model.load(path)).fingerprint == fw.fingerprint
    return folder, path, fw


class Board:
    """qemu-system-arm running an ELF with the first UART on a pseudo-terminal."""

    def __init__(self, machine: str, elf: Path) -> None:
        self.proc = subprocess.Popen(
            ["qemu-system-arm", "-machine", machine, "-display", "none", "-monitor", "none", "-serial", "pty"]
            + ["-kernel", str(elf)],
            stdout=subprocess.PIPE,
            stderr=subprocess.STDOUT,
            text=True,
        )
        assert self.proc.stdout is not None
        line = self.proc.stdout.readline()  # "char device redirected to /dev/pts/N (label serial0)"
        found = re.search(r"(/dev/pts/\d+)", line)
        assert found, line
        self.port = found.group(1)

    def close(self) -> None:
        self.proc.kill()
        self.proc.wait(timeout=10)


def _build(folder: Path, model_path: Path, board: str) -> Path:
    out = folder / board
    done = _kinetab("bench", "firmware", str(model_path), "--board", board, "-o", str(out), "--period", PERIOD,
                    "--fifo-depth", "16", cwd=folder)  # fmt: skip
    assert done.returncode == 0, done.stderr
    make = subprocess.run(["make", "-C", str(out)], capture_output=True, text=True, timeout=300)
    assert make.returncode == 0, make.stdout + make.stderr
    elf = out / f"{model.load(model_path).name}.elf"
    assert elf.exists()
    return elf


def _identify(port: str) -> messages.Identify:
    """HELLO until IDENTIFY arrives (the emulator may still be starting), as the host does."""
    with serial.Serial(port, timeout=0.05) as link:
        reader, deadline = framing.FrameReader(), time.monotonic() + 60
        while time.monotonic() < deadline:
            link.write(framing.frame(messages.encode(messages.Hello())))
            end = time.monotonic() + 1.0
            while time.monotonic() < end:
                for payload in reader.feed(link.read(256)):
                    msg = messages.decode(payload)
                    if isinstance(msg, messages.Identify):
                        return msg
    pytest.fail(f"no IDENTIFY from {port} within 60 s")


@needs_qemu
@pytest.mark.parametrize("board", ["mps2-an386", "mps2-an385"])
def test_the_firmware_builds_boots_and_identifies_itself(vehicle, board):
    folder, path, fw = vehicle
    running = Board(boards.board(board).qemu_machine, _build(folder, path, board))
    try:
        ident = _identify(running.port)
    finally:
        running.close()
    assert ident.fingerprint == fw.fingerprint
    assert (ident.version, ident.period_us, ident.fifo_depth) == (messages.PROTOCOL_VERSION, 50_000, 16)


@needs_qemu
def test_a_bench_run_against_the_emulated_board_matches_the_emulation_bit_for_bit(vehicle):
    """`bench plan` and `bench run` against the firmware on the emulated Cortex-M4: every setpoint is
    answered once, in order, and the feed-forward current the firmware computed on the emulated core
    equals the Python emulation of the program on the logged setpoints."""
    folder, path, fw = vehicle
    running = Board(boards.AN386.qemu_machine, _build(folder, path, "mps2-an386"))
    try:
        plan, log = folder / "plan.csv", folder / "log.csv"
        done = _kinetab("bench", "plan", str(path), "-o", str(plan), "--duration", "5", "--period", PERIOD, cwd=folder)
        assert done.returncode == 0, done.stderr
        done = _kinetab("bench", "run", str(path), "--port", running.port, "--plan", str(plan), "--log", str(log),
                        "--yes", cwd=folder)  # fmt: skip
        assert done.returncode == 0, done.stderr
    finally:
        running.close()
    meta = json.loads(log.with_suffix(".json").read_text())
    assert meta["ended"] == "completed" and meta["samples"] == meta["log_rows"] == 100
    assert meta["missing_samples"] == 0 and not any(meta["drops"].values())
    with log.open() as fh:
        rows = list(csv.DictReader(fh))
    si = {planfile.SI_NAME[c]: np.array([float(r[c]) for r in rows]) for c in planfile.PLAN_COLUMNS[1:]}
    want = emulate.run(fw.design.feedforward, fw.tables, interface.to_steps(fw.vehicle, interface.FF_IN, si))["current"]
    amps = np.array([[float(r["ff_current_right"]), float(r["ff_current_left"])] for r in rows])
    got = np.round(amps / fw.vehicle.firmware.current_lsb_a).astype(np.int64)
    assert np.array_equal(got, want) and np.abs(want).max() > 0


def test_an_unknown_board_is_one_line_and_writes_nothing(vehicle, tmp_path):
    _, path, _ = vehicle
    done = _kinetab("bench", "firmware", str(path), "--board", "mps3", "-o", str(tmp_path / "out"), cwd=tmp_path)
    assert done.returncode == 2 and done.stderr.count("\n") == 1 and "mps2-an386" in done.stderr
    assert not (tmp_path / "out").exists()


@_needs("arm-none-eabi-gcc", "cmake")
def test_the_cmake_project_regenerates_on_a_model_change_and_gates_on_verify(vehicle, tmp_path):
    """The user's day-to-day loop in their own build system: the CMake project builds the ELF; after a
    model change the next build regenerates the feed-forward C, then verify fails the build naming the
    command that remakes the rest; after that command the build passes again."""
    _, source, _ = vehicle
    path = tmp_path / source.name
    path.write_text(source.read_text(encoding="utf-8"), encoding="utf-8")
    out, build = tmp_path / "fw", tmp_path / "build"
    remake = ["bench", "firmware", str(path), "--board", "mps2-an386", "-o", str(out), "--period", "20 ms"]
    assert _kinetab(*remake, cwd=tmp_path).returncode == 0
    kinetab_cmd = ";".join(KINETAB)  # a CMake list: the package under test, as a command
    configure = subprocess.run(
        ["cmake", "-S", str(out), "-B", str(build), f"-DCMAKE_TOOLCHAIN_FILE={out / 'arm-none-eabi.cmake'}",
         f"-DKINETAB={kinetab_cmd}"],
        capture_output=True, text=True, timeout=300,
    )  # fmt: skip
    assert configure.returncode == 0, configure.stdout + configure.stderr

    def cmake_build() -> subprocess.CompletedProcess[str]:
        return subprocess.run(["cmake", "--build", str(build)], capture_output=True, text=True, timeout=600)

    first = cmake_build()
    assert first.returncode == 0 and "verify: all" in first.stdout and (build / "tugboat.elf").exists(), first.stdout
    text = path.read_text(encoding="utf-8")
    mass = re.search(r'^mass = "([0-9.e+-]+) kg"', text, re.M)
    assert mass
    time.sleep(1.1)  # a newer modification time than the generated files, whatever the file system's resolution
    path.write_text(text.replace(mass.group(0), f'mass = "{float(mass.group(1)) * 1.05} kg"', 1), encoding="utf-8")
    stale = cmake_build()
    log = stale.stdout + stale.stderr
    assert stale.returncode != 0 and "kinetab: feed-forward tables from" in log
    assert f"run: kinetab bench firmware {path} --board mps2-an386 -o {out} --period '20000 us'" in log, log
    assert _kinetab(*remake, cwd=tmp_path).returncode == 0
    again = cmake_build()
    assert again.returncode == 0, again.stdout + again.stderr


@needs_qemu
def test_readme_emulated_board_block_runs_as_written(tmp_path):
    """README's emulated-board block, verbatim, on an invented vehicle saved as cart.toml: the firmware is
    written, built, started, and a bench run against it completes."""
    from tests.test_readme_sequence import _run, _tools, block

    doc, _ = invented_feasible(1804, "cart")
    work = tmp_path / "work"
    work.mkdir()
    (work / "cart.toml").write_text(to_toml(doc), encoding="utf-8")
    _run(block("kinetab bench firmware"), work, _tools(tmp_path), "emulated-board block")
    meta = json.loads((work / "log.json").read_text())
    assert meta["ended"] == "completed" and meta["samples"] == 100
