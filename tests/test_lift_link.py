"""The lift on the bench link (hil/PROTOCOL.md, version 3): the generated link C, compiled for this host,
answers lift setpoints with lift samples carrying the feed-forward the Python emulation of the lift's
program computes, shares sequence numbers, flags and faults with the drive's setpoints, negotiates the
version, and drops a lift setpoint as an unknown type when the model has no lift. Vehicles are invented
(tests/helpers.invented) with invented lifts (tests/test_lift.random_lift)."""

from __future__ import annotations

import subprocess

import numpy as np
import pytest
from kinetab.generator import emulate, hostc, interface, render, synthesis
from kinetab.hil import framing, linkview, messages, simfirmware

from tests import cortexm
from tests.csteps import needs_gcc, write_files
from tests.helpers import invented, vehicle_from
from tests.test_lift import random_lift

pytestmark = needs_gcc


def lift_firmware(seed: int) -> synthesis.Firmware:
    doc, _ = invented(seed, "hoist")
    doc["lift"] = random_lift(np.random.default_rng(seed))
    return synthesis.synthesise(vehicle_from(doc))


def _send(lib: simfirmware.SimFirmware, *msgs: messages.Message) -> None:
    lib.receive(b"".join(framing.frame(messages.encode(m)) for m in msgs))


def _received(lib: simfirmware.SimFirmware) -> list:
    return [messages.decode(p) for p in framing.FrameReader().feed(lib.transmit())]


@pytest.fixture(scope="module")
def hoist(tmp_path_factory):
    fw = lift_firmware(11)
    return fw, simfirmware.SimFirmware(fw, tmp_path_factory.mktemp("hoist"), period_us=1000, fifo_depth=8)


def test_the_controller_answers_the_highest_version_both_speak(hoist):
    """Version negotiation (PROTOCOL.md): the highest version the controller speaks that is not above the
    host's; a host older than the controller's oldest gets the oldest, and decides itself."""
    _fw, lib = hoist
    for host, answer in ((3, 3), (2, 2), (9, messages.PROTOCOL_VERSION), (1, min(messages.SPOKEN))):
        _send(lib, messages.Hello(host))
        (ident,) = _received(lib)
        assert ident.version == answer, host


def test_lift_and_drive_setpoints_share_one_run(hoist):
    """Lift setpoints are answered with lift samples (the emulated lift current, the lift's measurement),
    drive setpoints with drive samples, in sequence order; the last one ends the run; a lift setpoint
    flagged NO_FEEDFORWARD reaches the apply hook and the sample with zero current."""
    fw, lib = hoist
    assert fw.lift is not None
    lim = fw.lift.limits
    lift_rows = np.array([[lim.speed // 2, lim.accel // 3, lim.payload], [-lim.speed // 3, -lim.accel, 0]])
    drive_row = (300, -200, 40, -10, 50, -20, 100)
    _send(lib, messages.Arm(1, 4))
    assert _received(lib) == [messages.Armed(1, 8)]
    _send(
        lib,
        messages.LiftSetpoint(1, 0, tuple(int(x) for x in lift_rows[0])),
        messages.Setpoint(2, 0, drive_row),
        messages.LiftSetpoint(3, messages.NO_FEEDFORWARD, tuple(int(x) for x in lift_rows[1])),
        messages.LiftSetpoint(4, messages.LAST, tuple(int(x) for x in lift_rows[1])),
    )
    lib.set_measured((11, 12, 13, 14))
    lib.set_lift_measured((55, -66))
    axes, applied = [], []
    out = []
    for _ in range(5):
        lib.tick()
        axes.append(lib.applied_axis())
        applied.append(lib.applied_lift())
        out += _received(lib)
    fields = {name: lift_rows[:, k] for k, name in enumerate(interface.LIFT_IN.columns)}
    want = emulate.run(fw.lift.program, fw.lift.tables, fields)["current"][:, 0]
    drive_fields = interface.rows_to_fields(interface.FF_IN, np.array([drive_row]))
    drive = emulate.run(fw.design.feedforward, fw.tables, drive_fields)
    assert axes[:4] == ["lift", "drive", "lift", "lift"]
    assert applied[2] == (tuple(int(x) for x in lift_rows[1]), (0,))  # the hook got no feed-forward
    samples = [m for m in out if isinstance(m, messages.Sample | messages.LiftSample)]
    assert [type(m).__name__ for m in samples] == ["LiftSample", "Sample", "LiftSample", "LiftSample"]
    assert [m.seq for m in samples] == [1, 2, 3, 4]
    assert samples[0].ff == (int(want[0]),) and samples[0].measured == (55, -66)
    assert samples[1].ff == tuple(int(x) for x in drive["current"][0]) and samples[1].measured == (11, 12, 13, 14)
    assert samples[2].ff == (0,) and samples[3].ff == (int(want[1]),) != (0,)
    assert samples[3].status & messages.STATUS_LAST
    assert out[-1] == messages.Fault(messages.FaultCode.END, 4) and lib.applied()[3] is True


def test_a_failed_lift_measurement_halts_with_the_firmware_fault(hoist):
    _fw, lib = hoist
    _send(lib, messages.Arm(1, 1), messages.LiftSetpoint(1, 0, (0, 0, 0)), messages.LiftSetpoint(2, 0, (0, 0, 0)))
    _received(lib)
    lib.set_measured((0, 0, 0, 0), ok=False)
    lib.tick()
    lib.tick()
    assert _received(lib)[-1] == messages.Fault(messages.FaultCode.FIRMWARE, 1)
    lib.set_measured((0, 0, 0, 0), ok=True)


def test_a_controller_without_a_lift_drops_lift_setpoints(tmp_path):
    """A model without [lift]: the lift setpoint is an unknown type (counted), nothing is queued."""
    _doc, fw = invented(12, "cart")
    lib = simfirmware.SimFirmware(fw, tmp_path, period_us=1000, fifo_depth=8)
    _send(lib, messages.Arm(1, 2))
    _received(lib)
    _send(lib, messages.LiftSetpoint(1, 0, (1, 2, 3)))
    status = lib.status()
    assert (status.drop_unknown, status.fifo_count, status.state) == (1, 0, "armed")


def test_lift_link_c_is_strict_on_the_host_and_for_cortex_m(hoist, tmp_path):
    """The link C of a model with a lift under the strict flags: host gcc (tests/csteps), and the compiler
    most firmware teams use for M0+ and M4 when it is installed."""
    fw, _lib = hoist
    files = write_files(tmp_path, {**render.render(fw), **linkview.render_link(fw)})
    source = files / interface.file_names(fw.vehicle.name)["link_source"]
    hostc.compile_c([source], tmp_path / "link.o", include=[files], extra=["-c"])
    if not cortexm.arm_gcc_available():
        return
    for target in ("cortex_m0plus", "cortex_m4"):
        cmd = ["arm-none-eabi-gcc", *cortexm.GCC_TARGETS[target], *cortexm.STRICT, "-Os", "-c", f"-I{files}"]
        subprocess.run([*cmd, str(source), "-o", str(tmp_path / f"{target}.o")], check=True, capture_output=True)
