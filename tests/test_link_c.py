"""The controller side of the bench link (generated C): strict flags on the host and Cortex-M0+/M4, the
parser under 100,000 random and mutated frames with AddressSanitizer and UndefinedBehaviorSanitizer
(same verdict as the Python reader), and its behaviour through the simulated controller's library."""

from __future__ import annotations

import subprocess

import jinja2
import numpy as np
import pytest
from kinetab.generator import emulate, hostc, interface
from kinetab.hil import framing, linkview, messages, simfirmware

from tests import cortexm
from tests.csteps import needs_gcc, write_files
from tests.firmware_fixtures import demo_files, demo_firmware

FUZZ = __import__("pathlib").Path(__file__).parent / "c" / "link_fuzz.c.j2"


@pytest.fixture(scope="module")
def link_dir(tmp_path_factory):
    fw = demo_firmware()
    return write_files(tmp_path_factory.mktemp("link"), {**demo_files(), **linkview.render_link(fw)})


def _fuzz_source() -> str:
    tpl = jinja2.Template(FUZZ.read_text(), undefined=jinja2.StrictUndefined)
    return tpl.render(
        prefix="larkspur", link_header="larkspur_link.h", measured_type=interface.MEASURED.c_type("larkspur")
    )


def _python_verdicts(stream: bytes) -> list[str]:
    """What the Python reader says of every non-empty frame, as the controller receives them."""
    out = []
    for raw in stream.split(b"\x00")[:-1]:
        if not raw:
            continue
        reader = framing.FrameReader()
        got = reader.feed(raw + b"\x00")
        if got:
            msg = messages.decode(got[0], messages.TO_CONTROLLER)
            out.append(msg if isinstance(msg, str) else "ok")
        else:
            out.append("crc" if reader.drops.crc else "length")
    return out


def _frames(rng: np.random.Generator, n: int) -> bytes:
    """Valid frames of every kind, each mutated (flips, cuts, inserts, swaps) or left whole, and noise."""
    kinds = [
        messages.Hello(),
        messages.Arm(1, 8),
        messages.Halt(),
        messages.Setpoint(1, 0, (5,) * messages.N_IN),
        messages.Sample(1, 1, 3, 1, 0, (1, 2), (3, 4, 5, 6)),
        messages.Fault(2, 9),
    ]
    parts = []
    for _ in range(n):
        wire = bytearray(framing.frame(messages.encode(kinds[int(rng.integers(len(kinds)))]))[:-1])
        what = int(rng.integers(6))
        if what == 1:
            wire[int(rng.integers(len(wire)))] ^= 1 << int(rng.integers(8))
        elif what == 2:
            del wire[int(rng.integers(len(wire))) :]
        elif what == 3:
            wire.insert(int(rng.integers(len(wire) + 1)), int(rng.integers(1, 256)))
        elif what == 4:
            wire = bytearray(rng.integers(1, 256, int(rng.integers(1, 90)), dtype=np.uint8).tobytes())
        parts.append(bytes(wire).replace(b"\x00", b"\x01") if what == 4 else bytes(wire))
    return b"\x00".join(parts) + b"\x00"


@needs_gcc
@pytest.mark.slow
def test_parser_under_sanitizers_agrees_with_python(link_dir):
    src = link_dir / "fuzz.c"
    src.write_text(_fuzz_source())
    exe = hostc.compile_c(
        [src, link_dir / "larkspur_link.c", link_dir / "larkspur_ff.c"],
        link_dir / "fuzz",
        include=[link_dir],
        opt="-O1",
        extra=["-g", "-fsanitize=address,undefined", "-fno-sanitize-recover=all"],
    )
    stream = _frames(np.random.default_rng(2026), 103_000)  # some mutations leave an empty frame
    done = subprocess.run([str(exe)], input=stream, capture_output=True, check=True)
    assert done.stderr == b""  # no sanitizer report
    got = done.stdout.decode().split()
    want = _python_verdicts(stream)
    assert len(got) == len(want) >= 100_000
    assert got == want
    assert want.count("ok") > 10_000 and {"crc", "length", "unknown_type"} <= set(want)


@needs_gcc
def test_link_strict_on_the_host(link_dir):
    for defines in ([], ["LARKSPUR_LINK_CRC_BITWISE"]):  # the CRC table, and the bit-by-bit form
        hostc.compile_c(
            [link_dir / "larkspur_link.c"], link_dir / "link.o", include=[link_dir], defines=defines, extra=["-c"]
        )


@pytest.mark.slow
@pytest.mark.skipif(not cortexm.zig_available(), reason="pip install ziglang")
@pytest.mark.parametrize("target", ["cortex_m0plus", "cortex_m4"])
def test_link_strict_on_cortex_m(link_dir, target, tmp_path):
    obj = tmp_path / "link.o"
    cmd = [*cortexm.zig_cc(target), "-O2", "-c", f"-I{link_dir}", str(link_dir / "larkspur_link.c"), "-o", str(obj)]
    subprocess.run(cmd, check=True, capture_output=True, text=True)
    assert obj.stat().st_size > 0


@pytest.fixture()
def firmware(tmp_path):
    return simfirmware.SimFirmware(demo_firmware(), tmp_path, period_us=1000, fifo_depth=8)


def _send(fwlib, *msgs):
    fwlib.receive(b"".join(framing.frame(messages.encode(m)) for m in msgs))


def _received(fwlib) -> list:
    reader = framing.FrameReader()
    return [messages.decode(p) for p in reader.feed(fwlib.transmit())]


def test_identify_arm_stream_and_end(firmware):
    """One sample per setpoint, in order, with the feed-forward the Python emulation computes; the
    sample of the last setpoint ends the run with a halt of code END."""
    fw = demo_firmware()
    _send(firmware, messages.Hello())
    (ident,) = _received(firmware)
    assert ident == messages.Identify(messages.PROTOCOL_VERSION, fw.fingerprint, 1000, 8, 100)
    _send(firmware, messages.Arm(1, 3))
    assert _received(firmware) == [messages.Armed(1, 8)]
    rows = np.array([[400 * k, -300, 50, -20, 100, -40, 300] for k in range(5)], dtype=np.int64)
    _send(
        firmware,
        *[
            messages.Setpoint(k + 1, messages.LAST if k == 4 else 0, tuple(int(x) for x in r))
            for k, r in enumerate(rows)
        ],
    )
    firmware.set_measured((11, 12, 13, 14))
    out = []
    for _ in range(7):
        firmware.tick()
        out += _received(firmware)
    samples = [m for m in out if isinstance(m, messages.Sample)]
    assert [s.seq for s in samples] == [1, 2, 3, 4, 5] and samples[-1].status & messages.STATUS_LAST
    want = emulate.run(fw.design.feedforward, fw.tables, interface.rows_to_fields(interface.FF_IN, rows))["current"]
    assert [s.ff for s in samples] == [tuple(int(x) for x in w) for w in want]
    assert samples[0].measured == (11, 12, 13, 14)
    assert out[-1] == messages.Fault(messages.FaultCode.END, 5) and firmware.applied()[3] is True


def test_no_feedforward_flag_applies_and_reports_zero_current(firmware):
    """A setpoint flagged NO_FEEDFORWARD (the wheels-up rig) reaches the firmware's apply hook with zero
    feed-forward current and the sample reports zero; an unflagged one carries the emulated value."""
    fw = demo_firmware()
    _send(firmware, messages.Arm(1, 2))
    _received(firmware)
    row = (400, -300, 50, -20, 100, -40, 300)
    _send(firmware, messages.Setpoint(1, messages.NO_FEEDFORWARD, row), messages.Setpoint(2, messages.LAST, row))
    firmware.set_measured((1, 2, 3, 4))
    want = emulate.run(fw.design.feedforward, fw.tables, interface.rows_to_fields(interface.FF_IN, np.array([row])))
    plain = tuple(int(x) for x in want["current"][0])
    firmware.tick()
    assert firmware.applied()[2] == (0, 0)  # the apply hook got no feed-forward
    firmware.tick()
    assert firmware.applied()[2] == plain != (0, 0)
    firmware.tick()
    samples = [m for m in _received(firmware) if isinstance(m, messages.Sample)]
    assert [(m.seq, m.ff) for m in samples] == [(1, (0, 0)), (2, plain)]


def test_safety_halts(firmware):
    """The motors are halted when the FIFO runs dry, on the watchdog, on HALT; a setpoint while not armed
    is refused; after a halt only a new ARM starts again."""
    _send(firmware, messages.Arm(1, 1), messages.Setpoint(1, 0, (0,) * messages.N_IN))
    firmware.tick()
    firmware.tick()  # the FIFO is empty now
    assert messages.Fault(messages.FaultCode.FIFO_DRY, 1) in _received(firmware) and firmware.applied()[3]
    _send(firmware, messages.Setpoint(2, 0, (0,) * messages.N_IN))
    assert _received(firmware) == [messages.Fault(messages.FaultCode.NOT_ARMED, 2)]
    _send(firmware, messages.Arm(10, 4), messages.Setpoint(10, 0, (0,) * messages.N_IN))
    _received(firmware)
    for _ in range(101):  # armed, still filling, and the host silent: the watchdog halts
        firmware.tick()
    assert _received(firmware)[-1] == messages.Fault(messages.FaultCode.WATCHDOG, 10)
    _send(firmware, messages.Arm(20, 1), messages.Setpoint(20, 0, (0,) * messages.N_IN), messages.Halt())
    assert _received(firmware)[-1] == messages.Fault(messages.FaultCode.HALT, 20)


def test_out_of_sequence_setpoints_are_ignored(firmware):
    _send(
        firmware,
        messages.Arm(1, 2),
        messages.Setpoint(1, 0, (0,) * messages.N_IN),
        messages.Setpoint(3, 0, (0,) * messages.N_IN),
        messages.Setpoint(2, 0, (0,) * messages.N_IN),
    )
    firmware.tick()
    firmware.tick()
    samples = [m for m in _received(firmware) if isinstance(m, messages.Sample)]
    assert samples[0].seq == 1 and samples[0].last_rx == 2 and firmware.status().drop_order == 1


@pytest.mark.skipif(not cortexm.arm_gcc_available(), reason="apt install gcc-arm-none-eabi")
@pytest.mark.parametrize("target", ["cortex_m0plus", "cortex_m4"])
def test_generated_c_strict_with_gcc_arm_none_eabi(link_dir, target, tmp_path):
    """The feed-forward and link C with the strict flags under the compiler most firmware teams use."""
    for name in ("larkspur_ff.c", "larkspur_link.c"):
        cmd = [
            "arm-none-eabi-gcc",
            *cortexm.GCC_TARGETS[target],
            *cortexm.STRICT,
            "-Os",
            "-c",
            f"-I{link_dir}",
            str(link_dir / name),
            "-o",
            str(tmp_path / f"{name}.o"),
        ]
        subprocess.run(cmd, check=True, capture_output=True, text=True)


def _tick_collect(fwlib, ticks: int) -> list[tuple[int, object]]:
    out = []
    for t in range(ticks):
        fwlib.tick()
        out += [(t, m) for m in _received(fwlib)]
    return out


def test_a_halt_is_reported_again_until_the_host_answers(firmware):
    """The controller's own halt (here the end of the plan) is sent again every watchdog time, at most
    FAULT_REPEATS times, so one lost frame cannot fail a completed run; HELLO, ARM or HALT stops it;
    the host's own HALT is not repeated. PROTOCOL.md states the same count."""
    end = messages.Fault(messages.FaultCode.END, 1)
    _send(firmware, messages.Arm(1, 1), messages.Setpoint(1, messages.LAST, (0,) * messages.N_IN))
    _received(firmware)
    seen = _tick_collect(firmware, 2 + 100 * (linkview.FAULT_REPEATS + 3))
    faults = [(t, m) for t, m in seen if isinstance(m, messages.Fault)]
    assert [m for _, m in faults] == [end] * (1 + linkview.FAULT_REPEATS)
    gaps = {b[0] - a[0] for a, b in zip(faults, faults[1:])}
    assert gaps == {linkview.WATCHDOG_TICKS} and firmware.status().repeats == 0
    # answered after the first repeat: no more
    _send(firmware, messages.Arm(2, 1), messages.Setpoint(2, messages.LAST, (0,) * messages.N_IN))
    _received(firmware)
    seen = _tick_collect(firmware, 2 + linkview.WATCHDOG_TICKS)
    assert [m for _, m in seen if isinstance(m, messages.Fault)] == [messages.Fault(messages.FaultCode.END, 2)] * 2
    _send(firmware, messages.Hello())
    assert [type(m) for m in _received(firmware)] == [messages.Identify]
    assert _tick_collect(firmware, 5 * linkview.WATCHDOG_TICKS) == []
    # the host's HALT: reported once
    _send(firmware, messages.Arm(3, 1), messages.Setpoint(3, 0, (0,) * messages.N_IN), messages.Halt())
    assert _received(firmware)[-1] == messages.Fault(messages.FaultCode.HALT, 3)
    assert _tick_collect(firmware, 3 * linkview.WATCHDOG_TICKS) == []
    protocol = (__import__("pathlib").Path(__file__).parents[1] / "hil" / "PROTOCOL.md").read_text()
    assert f"at most {linkview.FAULT_REPEATS} more times" in protocol


@pytest.fixture(scope="module")
def dory():
    from tests.helpers import invented_feasible

    return invented_feasible(1806, "dory")[1]


def test_the_slow_part_runs_at_its_own_rate(dory, tmp_path):
    """With <NAME>_LINK_SLOW_TICKS = 4 the link runs the slow part of the feed-forward (pitch, roll,
    payload) on the first setpoint of a run and every fourth after it, the fast part every tick: each
    sample's current is the emulation's on the setpoint's speeds and accelerations with the slow inputs of
    the last slow tick. The default (1) is the whole feed-forward every tick (the other tests)."""
    name = dory.vehicle.name.upper()
    firmware = simfirmware.SimFirmware(
        dory, tmp_path, period_us=1000, fifo_depth=16, defines=(f"{name}_LINK_SLOW_TICKS=4",)
    )
    n = 11
    rng = np.random.default_rng(1807)
    rows = np.column_stack(
        [rng.integers(-800, 800, (n, 4)), np.arange(n) * 37 - 150, np.arange(n) * -23 + 90, np.arange(n) * 41]
    ).astype(np.int64)
    _send(firmware, messages.Arm(1, n))
    _received(firmware)
    _send(
        firmware,
        *[messages.Setpoint(k + 1, messages.LAST * (k == n - 1), tuple(map(int, r))) for k, r in enumerate(rows)],
    )
    firmware.set_measured((0, 0, 0, 0))
    samples = [m for _, m in _tick_collect(firmware, n + 2) if isinstance(m, messages.Sample)]
    latched = rows.copy()
    slow = [interface.FF_IN.columns.index(c) for c in ("pitch", "roll", "payload")]
    latched[:, slow] = rows[(np.arange(n) // 4) * 4][:, slow]

    def current(r: np.ndarray) -> list[tuple[int, ...]]:
        out = emulate.run(dory.design.feedforward, dory.tables, interface.rows_to_fields(interface.FF_IN, r))
        return [tuple(int(x) for x in w) for w in out["current"]]

    assert [s.seq for s in samples] == list(range(1, n + 1))
    assert [s.ff for s in samples] == current(latched) != current(rows)
