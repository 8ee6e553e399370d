"""The drive wire between the reference firmware and the simulated drive (hil/drivewire.py): frames are
COBS (Cheshire & Baker, IEEE/ACM Trans. Networking 7(2), 1999; the `cobs` package as the oracle) of a
type byte and little-endian fields (Python's `struct` as the oracle), and the simulated plant stays
stable at the slow control periods an emulated board runs."""

from __future__ import annotations

import struct

import numpy as np
import pytest
from cobs import cobs
from hypothesis import given
from hypothesis import strategies as st
from kinetab.generator import interface
from kinetab.hil import drivewire
from kinetab.hil.plant import Plant, PlantOptions
from kinetab.hil.stepdrive import StepDrive

from tests.helpers import invented_feasible

I32 = st.integers(-(2**31), 2**31 - 1)
N_IN, N_OUT, N_MEAS = (len(s.columns) for s in (interface.FF_IN, interface.FF_OUT, interface.MEASURED))


@pytest.fixture(scope="module")
def skiff():
    return invented_feasible(1806, "skiff")[1]


@given(
    tick=st.integers(0, 0xFFFF),
    halted=st.integers(0, 1),
    values=st.lists(I32, min_size=N_IN + N_OUT, max_size=N_IN + N_OUT),
)
def test_a_command_is_cobs_of_its_type_byte_and_little_endian_fields(tick, halted, values):
    inputs, ff = tuple(values[:N_IN]), tuple(values[N_IN:])
    msg = drivewire.Command(tick=tick, halted=halted, inputs=inputs, ff=ff, late_ticks=7, stack_bytes=2**32 - 1)
    wire = drivewire.frame(msg)
    body = struct.pack(f"<BHB{len(values)}iII", drivewire.DriveType.COMMAND, tick, halted, *values, 7, 2**32 - 1)
    assert wire == cobs.encode(body) + b"\x00" and wire.count(0) == 1
    assert drivewire.decode(wire[:-1]) == msg


@given(tick=st.integers(0, 0xFFFF), measured=st.lists(I32, min_size=N_MEAS, max_size=N_MEAS))
def test_a_reading_round_trips_and_a_damaged_one_is_refused(tick, measured):
    msg = drivewire.Reading(tick=tick, measured=tuple(measured))
    encoded = drivewire.frame(msg)[:-1]
    assert cobs.decode(encoded) == struct.pack(f"<BH{N_MEAS}i", drivewire.DriveType.READING, tick, *measured)
    assert drivewire.decode(encoded) == msg
    assert drivewire.decode(encoded[:-1]) is None  # a lost byte: wrong length or broken COBS
    assert drivewire.decode(cobs.encode(b"\x7f" + cobs.decode(encoded)[1:])) is None  # unknown type


def test_the_c_offsets_follow_the_layout():
    """Every field and column offset the drive C uses lies inside its message, without overlap."""
    ctx = drivewire.c_context()
    at = ctx["command_at"]
    cmd = [at["tick"], at["halted"], at["late_ticks"], at["stack_bytes"]]
    cmd += [o for _, o in ctx["command_inputs"] + ctx["command_ff"]]
    widths = [2, 1] + [4] * (len(cmd) - 2)
    spans = sorted(zip(cmd, widths))
    assert spans[0][0] == 1 and all(a + w == b for (a, w), (b, _) in zip(spans, spans[1:]))
    assert spans[-1][0] + spans[-1][1] == ctx["command_bytes"] < 254  # one COBS block: the C encoder's limit
    read = sorted(o for _, o in ctx["reading_measured"])
    assert read == list(range(3, ctx["reading_bytes"], 4))


@pytest.mark.parametrize("period_s", [0.001, 0.02, 0.05])
def test_the_simulated_drive_settles_at_any_control_period(skiff, period_s):
    """A sampled PI loop as fast as its period would diverge: at 1, 20 and 50 ms per command the vehicle
    (invented) reaches a constant speed setpoint and holds it (tracking error under 5 %)."""
    fw = skiff
    drive = StepDrive(fw, Plant(truth=fw.vehicle, options=PlantOptions(period_s=period_s)))
    lsb = fw.vehicle.firmware.speed_lsb_mps
    speed = 0.5
    si = {"speed_right": speed, "speed_left": speed}
    steps = {c: 0 for c in interface.FF_IN.columns}
    steps.update({c: round(si[c] / lsb) for c in si if c in steps})
    inputs = tuple(steps[c] for c in interface.FF_IN.columns)
    measured = []
    for _ in range(round(3.0 / period_s)):
        drive.apply(inputs, (0, 0), halted=False)
        measured.append(drive.measure())
    end = np.array(measured[-round(0.5 / period_s) :], dtype=float)[:, 2:] * lsb  # the last half second
    assert np.all(np.isfinite(end)) and np.abs(end - round(speed / lsb) * lsb).max() < 0.05 * speed
