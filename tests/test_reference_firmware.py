"""The reference firmware (`kinetab bench firmware`) on emulated Arm MPS2 boards, as `kinetab bench simulate
--board` runs it: the project's own Makefile builds it with arm-none-eabi-gcc, qemu-system-arm runs it (a
real Cortex-M instruction set, vector table, SysTick and CMSDK UART interrupts), the bench talks to it over
the emulated UART0 on a pseudo-terminal, and the simulated drive answers its UART1. The feed-forward
current the firmware computed is checked against the Python emulation of the same program, row by row,
and the measurements against the host simulation (the compiler and the emulator are outside the project).

The emulator delivers host bytes to a CMSDK UART one per emulator main-loop turn (a few kB/s, measured
with qemu 7.2), so these runs use a 50 ms control period."""

from __future__ import annotations

import csv
import json
import os
import re
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import serial
from kinetab.generator import emulate, interface, model, synthesis
from kinetab.hil import framing, messages, planfile, session

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


class BoardSim:
    """A `bench simulate MODEL --board B` process: the link's port is the first line it prints."""

    def __init__(self, model_path: Path, board: str, *extra: str) -> None:
        args = ["bench", "simulate", str(model_path), "--board", board, "--period", PERIOD, *extra]
        self.proc = subprocess.Popen([*KINETAB, *args], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        assert self.proc.stdout is not None and self.proc.stderr is not None
        self.port = self.proc.stdout.readline().strip()
        if not self.port.startswith("/dev/"):
            self.proc.kill()  # before reading its errors: a live process would never close them
            pytest.fail(f"bench simulate --board printed no port: {self.proc.communicate()[1]}")

    def children(self) -> list[int]:
        """Processes this one started (the emulator), from /proc."""
        text = Path(f"/proc/{self.proc.pid}/task/{self.proc.pid}/children").read_text()
        return [int(pid) for pid in text.split()]

    def stop(self, *sigs: int) -> tuple[int, str]:
        """Send the signals (SIGTERM by default) at once, wait; (exit code, stderr). Fails if a process it
        started outlives it."""
        started = self.children()
        for sig in sigs or (signal.SIGTERM,):
            self.proc.send_signal(sig)
        try:
            _, err = self.proc.communicate(timeout=30)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            _, err = self.proc.communicate()
        left = [pid for pid in started if _state(pid) not in ("gone", "Z")]
        assert not left, f"left running: {left}"
        return self.proc.returncode, err


def _state(pid: int) -> str:
    """The process's state letter from /proc (R, S, Z, ...), or "gone"."""
    try:
        return Path(f"/proc/{pid}/stat").read_text().split(")")[-1].split()[0]
    except OSError:
        return "gone"


@pytest.fixture
def board_sim():
    """Start `bench simulate --board`; stopped (and checked for leftovers) at the end of the test."""
    running: list[BoardSim] = []

    def start(model_path: Path, board: str = "mps2-an386", *extra: str) -> BoardSim:
        running.append(BoardSim(model_path, board, *extra))
        return running[-1]

    yield start
    for sim in running:
        if sim.proc.poll() is None:
            sim.stop()


def _plan(folder: Path, path: Path, seconds: float, name: str = "plan.csv") -> Path:
    plan = folder / name
    done = _kinetab("bench", "plan", str(path), "-o", str(plan), "--duration", str(seconds), "--period", PERIOD,
                    cwd=folder)  # fmt: skip
    assert done.returncode == 0, done.stderr
    return plan


def _run(folder: Path, path: Path, port: str, plan: Path, log: Path) -> subprocess.CompletedProcess[str]:
    return _kinetab("bench", "run", str(path), "--port", port, "--plan", str(plan), "--log", str(log), "--yes",
                    cwd=folder)  # fmt: skip


def _rows(log: Path) -> list[dict[str, str]]:
    with log.open() as fh:
        return list(csv.DictReader(fh))


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
@pytest.mark.parametrize(
    "board,sigs", [("mps2-an386", (signal.SIGTERM,)), ("mps2-an385", (signal.SIGINT, signal.SIGINT))]
)
def test_the_firmware_boots_identifies_itself_and_stops_with_no_process_left(vehicle, board_sim, board, sigs):
    """`bench simulate --board` builds the firmware, runs it on the emulator and prints the port first;
    SIGTERM, or Ctrl-C pressed twice, stops the emulator with it and still reports the firmware's health."""
    _, path, fw = vehicle
    sim = board_sim(path, board, "--watchdog", "200 ms")
    assert len(sim.children()) == 1
    ident = _identify(sim.port)
    assert ident.fingerprint == fw.fingerprint
    assert (ident.version, ident.period_us, ident.fifo_depth, ident.watchdog_ms) == (
        messages.PROTOCOL_VERSION, 50_000, 16, 200)  # fmt: skip
    code, err = sim.stop(*sigs)
    assert code == 128 + sigs[0] and err.strip().splitlines()[-1] in ("kinetab: terminated", "kinetab: interrupted")
    assert "firmware: " in err and "0 bad drive frames" in err, err


@needs_qemu
def test_thirty_seconds_on_the_board_bit_exact_and_as_on_the_host(vehicle, board_sim):
    """A 30-s plan (600 periods of 50 ms) on the emulated Cortex-M4: every setpoint answered once and in
    order, no drops, no FIFO underrun; the feed-forward current the firmware computed on the emulated core
    equals the Python emulation of the program on every row; and the measurements (the same simulated
    drive, reached over the drive UART) equal the host simulation's on the same plan, row for row."""
    folder, path, fw = vehicle
    plan = _plan(folder, path, 30)
    logs = {"board": folder / "board.csv", "host": folder / "host.csv"}
    done = _run(folder, path, board_sim(path).port, plan, logs["board"])
    assert done.returncode == 0, done.stderr
    host = subprocess.Popen([*KINETAB, "bench", "simulate", str(path), "--period", PERIOD, "--fifo-depth", "256"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)  # fmt: skip
    assert host.stdout is not None
    try:
        done = _run(folder, path, host.stdout.readline().strip(), plan, logs["host"])
    finally:
        host.terminate()
        host.communicate(timeout=30)
    assert done.returncode == 0, done.stderr
    meta = json.loads(logs["board"].with_suffix(".json").read_text())
    assert meta["ended"] == "completed" and meta["samples"] == meta["log_rows"] == 600
    assert meta["missing_samples"] == 0 and not any(meta["drops"].values()) and meta["faults"] == []
    rows = _rows(logs["board"])
    assert [int(r["seq"]) for r in rows] == list(range(1, 601))
    si = {planfile.SI_NAME[c]: np.array([float(r[c]) for r in rows]) for c in planfile.PLAN_COLUMNS[1:]}
    want = emulate.run(fw.design.feedforward, fw.tables, interface.to_steps(fw.vehicle, interface.FF_IN, si))["current"]
    amps = np.array([[float(r["ff_current_right"]), float(r["ff_current_left"])] for r in rows])
    got = np.round(amps / fw.vehicle.firmware.current_lsb_a).astype(np.int64)
    assert np.array_equal(got, want) and np.abs(want).max() > 0
    measured = ["current_right", "current_left", "measured_speed_right", "measured_speed_left"]
    assert [[r[c] for c in measured] for r in rows] == [[r[c] for c in measured] for r in _rows(logs["host"])]
    assert max(abs(float(r["measured_speed_right"])) for r in rows) > 0.05  # the vehicle moved


@needs_qemu
def test_the_board_refuses_another_vehicle_and_survives_garbage(vehicle, board_sim, tmp_path):
    """A plan for another model is refused before arming (fingerprint); random bytes on the link are
    dropped by the firmware, which then runs a plan to the end."""
    folder, path, fw = vehicle
    doc, other_fw = invented_feasible(1805, "tugboat")
    other = tmp_path / "tugboat.toml"
    other.write_text(to_toml(doc), encoding="utf-8")
    assert other_fw.fingerprint != fw.fingerprint
    sim = board_sim(path)
    refused = _run(tmp_path, other, sim.port, _plan(tmp_path, other, 5), tmp_path / "other.csv")
    assert refused.returncode == 1 and "fingerprint mismatch" in refused.stderr, refused.stderr
    assert f"0x{fw.fingerprint:08X}" in refused.stderr
    with serial.Serial(sim.port) as link:
        link.write(bytes(np.random.default_rng(5).integers(0, 256, 600, dtype=np.uint8)) + b"\x00")
        link.flush()
    log = tmp_path / "log.csv"
    done = _run(folder, path, sim.port, _plan(tmp_path, path, 5), log)
    assert done.returncode == 0, done.stderr
    assert json.loads(log.with_suffix(".json").read_text())["samples"] == 100


@needs_qemu
def test_a_silent_host_makes_the_firmware_halt_on_its_watchdog(vehicle, board_sim):
    _, path, _ = vehicle
    sim = board_sim(path, "mps2-an386", "--watchdog", "200 ms")
    _identify(sim.port)  # the emulator is up
    port = serial.serial_for_url(sim.port, timeout=0.1)
    link = session.Link(port)
    session.handshake(link, sim.port)
    link.send(messages.Arm(1, 8))
    link.send_many([messages.Setpoint(k, 0, (0,) * messages.N_IN) for k in range(1, 6)])  # then silence
    deadline, faults = time.monotonic() + 20, []
    while time.monotonic() < deadline and not faults:
        faults = [m for m in link.receive(0.1) if isinstance(m, messages.Fault)]
    port.close()
    assert faults and set(faults) == {messages.Fault(messages.FaultCode.WATCHDOG, 5)}, faults


def test_bench_simulate_board_missing_tools_and_fault_options_are_one_line(vehicle, tmp_path):
    """Without the cross compiler on PATH: one line naming the Debian package, exit 2. Fault injection
    belongs to the host simulation: refused with --board."""
    _, path, _ = vehicle
    empty = tmp_path / "bin"
    empty.mkdir()
    done = subprocess.run([*KINETAB, "bench", "simulate", str(path), "--board", "mps2-an386"], cwd=tmp_path,
                          capture_output=True, text=True, env={**os.environ, "PATH": str(empty)})  # fmt: skip
    assert done.returncode == 2 and done.stderr.count("\n") == 1, done.stderr
    assert "arm-none-eabi-gcc" in done.stderr and "gcc-arm-none-eabi" in done.stderr and not done.stdout
    done = _kinetab("bench", "simulate", str(path), "--board", "mps2-an386", "--drop-rate", "0.1", cwd=tmp_path)
    assert done.returncode == 2 and done.stderr.count("\n") == 1 and "--drop-rate" in done.stderr, done.stderr


@pytest.mark.parametrize("period,ticks", [("1 ms", 20), ("7 ms", 3), ("20 ms", 1), ("50 ms", 1)])
def test_the_project_runs_the_slow_part_at_fifty_hertz_at_most(vehicle, tmp_path, period, ticks):
    """The Makefile and the CMake project both set <NAME>_LINK_SLOW_TICKS to the fewest ticks that keep
    the slow part of the feed-forward at or under 50 Hz (1 ms: every 20th tick; 7 ms: every 3rd, 47.6 Hz)."""
    _, path, fw = vehicle
    out = tmp_path / "fw"
    done = _kinetab("bench", "firmware", str(path), "--board", "mps2-an385", "-o", str(out), "--period", period,
                    cwd=tmp_path)  # fmt: skip
    assert done.returncode == 0, done.stderr
    flag = f"{fw.vehicle.name.upper()}_LINK_SLOW_TICKS={ticks}"
    assert f"-D{flag}" in (out / "Makefile").read_text() and flag in (out / "CMakeLists.txt").read_text()


def test_an_unknown_board_is_one_line_and_writes_nothing(vehicle, tmp_path):
    _, path, _ = vehicle
    done = _kinetab("bench", "firmware", str(path), "--board", "mps3", "-o", str(tmp_path / "out"), cwd=tmp_path)
    assert done.returncode == 2 and done.stderr.count("\n") == 1 and "mps2-an386" in done.stderr
    assert not (tmp_path / "out").exists()


def _sections(elf: Path) -> list[tuple[str, int, int]]:
    """(name, address, size) of every section the firmware loads, read with pyelftools."""
    from elftools.elf.elffile import ELFFile

    with elf.open("rb") as fh:
        return [(s.name, s["sh_addr"], s["sh_size"]) for s in ELFFile(fh).iter_sections() if s["sh_flags"] & 2]


@_needs("arm-none-eabi-gcc", "cmake", "make")
def test_the_cmake_project_regenerates_on_a_model_change_and_gates_on_verify(vehicle, tmp_path):
    """The user's day-to-day loop in their own build system: the CMake project (configured as README says)
    builds the ELF, with the same loaded sections as the Makefile's build; after a model change the next
    build regenerates the feed-forward C, then verify fails the build naming the command that remakes the
    rest; after that command the build passes again."""
    _, source, _ = vehicle
    path = tmp_path / source.name
    path.write_text(source.read_text(encoding="utf-8"), encoding="utf-8")
    out, build = tmp_path / "fw", tmp_path / "build"
    remake = ["bench", "firmware", str(path), "--board", "mps2-an386", "-o", str(out), "--period", "20 ms"]
    assert _kinetab(*remake, cwd=tmp_path).returncode == 0
    kinetab_cmd = ";".join(KINETAB)  # a CMake list: the package under test, as a command
    configure = subprocess.run(
        ["cmake", "-S", str(out), "-B", str(build), "-DCMAKE_TOOLCHAIN_FILE=arm-none-eabi.cmake",
         f"-DKINETAB={kinetab_cmd}"],
        capture_output=True, text=True, timeout=300,
    )  # fmt: skip
    assert configure.returncode == 0, configure.stdout + configure.stderr

    def cmake_build() -> subprocess.CompletedProcess[str]:
        return subprocess.run(["cmake", "--build", str(build)], capture_output=True, text=True, timeout=600)

    first = cmake_build()
    assert first.returncode == 0 and "verify: all" in first.stdout and (build / "tugboat.elf").exists(), first.stdout
    assert subprocess.run(["make", "-s", "-C", str(out)], capture_output=True, timeout=300).returncode == 0
    made = _sections(out / "tugboat.elf")
    assert _sections(build / "tugboat.elf") == made and {".text", ".data", ".bss"} <= {n for n, _, _ in made}
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


@needs_qemu
def test_the_build_reports_flash_ram_and_the_painted_stack(vehicle, board_sim, tmp_path):
    """`bench simulate --board` reports the firmware's flash and RAM, which equal the ELF's section sizes
    (read with pyelftools from the same project built by its Makefile), and at the end the worst stack
    the firmware measured by painting: at least the largest frame gcc's -fstack-usage gives for any of
    its functions, and inside the stack the linker script reserves."""
    from elftools.elf.elffile import ELFFile
    from kinetab.hil import firmwareview

    _, path, fw = vehicle
    out = tmp_path / "fw"
    made = _kinetab("bench", "firmware", str(path), "--board", "mps2-an386", "-o", str(out), "--period", PERIOD,
                    "--fifo-depth", "16", cwd=tmp_path)  # fmt: skip
    assert made.returncode == 0, made.stderr
    assert subprocess.run(["make", "-s", "-C", str(out)], capture_output=True).returncode == 0
    with (out / f"{fw.vehicle.name}.elf").open("rb") as fh:
        size = {s.name: s["sh_size"] for s in ELFFile(fh).iter_sections()}
    sources = sorted(str(p.name) for p in out.glob("*.c"))
    cflags = ["-mcpu=cortex-m4", "-mthumb", "-Os", "-std=c99", "-ffreestanding", "-ffunction-sections"]
    usage = subprocess.run(
        ["arm-none-eabi-gcc", *cflags, "-fstack-usage", "-c", *sources], cwd=out, capture_output=True
    )
    assert usage.returncode == 0, usage.stderr
    frames = [int(line.split("\t")[1]) for su in out.glob("*.su") for line in su.read_text().splitlines()]
    sim = board_sim(path, "mps2-an386", "--watchdog", "5 s")  # as `bench firmware` above: the same C
    assert sim.proc.stderr is not None
    report = sim.proc.stderr.readline()
    flash = size[".text"] + size[".data"]
    ram = size[".data"] + size[".bss"]
    assert f"flash {flash} bytes, RAM {ram} bytes static + {firmwareview.STACK_BYTES} stack" in report, report
    _identify(sim.port)
    _identify(sim.port)  # the tick answering it reports the stack measured after the first answer
    code, err = sim.stop()
    found = re.search(r"worst stack (\d+) of (\d+) bytes", err)
    assert found, err
    assert max(frames) <= int(found.group(1)) < int(found.group(2)) == firmwareview.STACK_BYTES


def _campaign_log(folder: Path, path: Path, truth: Path, rig: str, board: str | None) -> Path:
    """One 30-s run of the rig's plan against the true vehicle, on the emulated board or on the host."""
    plan = folder / f"plan_{rig}.csv"  # written by the test, before the runs start
    args = ["bench", "simulate", str(path), "--truth", str(truth), "--noise", "20 mA", "--rig", rig, "--period", PERIOD]
    args += ["--fifo-depth", "32"]  # 1.6 s of setpoints: rides out a loaded machine's stalls
    args += ["--board", board] if board else []
    sim = subprocess.Popen([*KINETAB, *args], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    assert sim.stdout is not None
    log = folder / f"log_{rig}_{board or 'host'}.csv"
    try:
        done = _kinetab("bench", "run", str(path), "--port", sim.stdout.readline().strip(), "--plan", str(plan),
                        "--log", str(log), "--rig", rig, "--yes", cwd=folder)  # fmt: skip
    finally:
        sim.terminate()
        sim.communicate(timeout=30)
    assert done.returncode == 0, done.stderr
    return log


@needs_qemu
def test_a_fit_against_the_board_recovers_the_truth_as_well_as_against_the_host(vehicle, tmp_path):
    """Truth: body mass +15 %, with 20 mA current noise. A wheels-up and an on-floor run of 30 s at 50 ms on
    the emulated board, and the same against the host simulation: `bench fit` on the board's logs finds
    the true mass and Coulomb friction within 3 sigma, and the two fits agree within their combined
    3 sigma with error bars of the same size (at most 1.5 times apart)."""
    from concurrent.futures import ThreadPoolExecutor

    from kinetab.generator import model

    _, path, _ = vehicle
    text = path.read_text(encoding="utf-8")
    mass = re.search(r'^mass = "([0-9.e+-]+) kg"', text, re.M)
    assert mass
    truth = tmp_path / "truth.toml"
    truth.write_text(text.replace(mass.group(0), f'mass = "{float(mass.group(1)) * 1.15} kg"', 1), encoding="utf-8")
    for rig in ("wheels-up", "on-floor"):  # the plans first, then the four runs at once
        assert _kinetab("bench", "plan", str(path), "-o", str(tmp_path / f"plan_{rig}.csv"), "--duration", "30",
                 "--period", PERIOD, "--rig", rig, cwd=tmp_path).returncode == 0  # fmt: skip
    runs = [(rig, board) for board in ("mps2-an386", None) for rig in ("wheels-up", "on-floor")]
    with ThreadPoolExecutor(2) as pool:  # two at a time: an emulated board needs a core
        logs = list(pool.map(lambda run: _campaign_log(tmp_path, path, truth, *run), runs))
    fits = {}
    for name, pair in (("board", logs[:2]), ("host", logs[2:])):
        done = _kinetab("bench", "fit", str(path), *map(str, pair), "--json", cwd=tmp_path)
        assert done.returncode == 0, done.stderr
        fits[name] = {e["parameter"]: e["si"] for e in json.loads(done.stdout)["estimates"]}
    t = model.load(truth)
    for key, want in (("body.mass", t.body.mass_kg), ("friction.coulomb", t.friction.coulomb_n)):
        board, host = fits["board"][key], fits["host"][key]
        assert abs(board["estimate"] - want) <= 3 * board["standard_error"], (key, board, want)
        combined = (board["standard_error"] ** 2 + host["standard_error"] ** 2) ** 0.5
        assert abs(board["estimate"] - host["estimate"]) <= 3 * combined, (key, board, host)
        assert 1 / 1.5 <= board["standard_error"] / host["standard_error"] <= 1.5, (key, board, host)
