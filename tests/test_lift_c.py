"""The lift's generated C: bit-exact with the emulator (host gcc with the strict flags, inputs inside,
at and beyond the envelope), and the emulator within the proven bound of the float lift model, on
invented lifts (tests/test_lift.py's ranges) in int16 and int32 words."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from kinetab.generator import emulate, interface, liftfirmware, render, synthesis

from tests.csteps import build_harness, needs_gcc, run_harness, write_files
from tests.test_lift import WORKED, random_lift, with_lift


def _vehicle(seed: int, word: str):
    v = with_lift(WORKED if seed < 0 else random_lift(np.random.default_rng(seed)))
    return dataclasses.replace(v, firmware=dataclasses.replace(v.firmware, word=word))


def _rows(fw: liftfirmware.LiftFirmware, n: int, seed: int) -> np.ndarray:
    """Input rows (struct column order): uniform in the envelope, the deadband and blend band, every
    edge and its neighbours, and a tenth beyond the edges (clamped and flagged)."""
    lim, rng = fw.limits, np.random.default_rng(seed)
    his = {m.name: getattr(lim, m.limit) for m in interface.LIFT_IN.members}
    cols = []
    for m in interface.LIFT_IN.members:
        hi = his[m.name]
        lo = -hi if m.signed else 0
        col = rng.integers(lo, hi + 1, n)
        if m.name == "speed":
            near = 3 * max(lim.deadband, 1) + 3
            col[: n // 5] = rng.integers(-near, near + 1, n // 5)
        col[-n // 10 :] = rng.integers(lo - hi - 5, 2 * hi + 5, n // 10)
        cols.append(col)
    rows = np.stack(cols, -1)
    edges = np.array(
        [
            [s, a, p]
            for s in (-his["speed"], 0, his["speed"])
            for a in (-his["accel"], 0, his["accel"])
            for p in (0, his["payload"])
        ]
    )
    return np.concatenate([rows, edges, edges + 1, edges - 1])


def _fields(rows: np.ndarray) -> dict[str, np.ndarray]:
    return {name: rows[:, k] for k, name in enumerate(interface.LIFT_IN.columns)}


CASES = [(-1, "int16"), (1, "int16"), (2, "int32"), (3, "int16"), (4, "int32")]


@pytest.mark.parametrize(("seed", "word"), CASES)
def test_the_emulator_stays_within_the_proven_bound_of_the_float_lift_model(seed, word):
    """The float model at the clamped inputs (lift.py) against the emulated integers: never farther than
    the proven bound, which is within lift.current_budget."""
    v = _vehicle(seed, word)
    fw = synthesis.synthesise(v).lift
    assert fw is not None and v.lift is not None
    assert fw.bound_a <= v.lift.current_budget_a
    rows = _rows(fw, 40_000, seed + 10)
    out = emulate.run(fw.program, fw.tables, _fields(rows))
    lim = fw.limits
    clamped = {
        "speed": np.clip(rows[:, 0], -lim.speed, lim.speed),
        "accel": np.clip(rows[:, 1], -lim.accel, lim.accel),
        "payload": np.clip(rows[:, 2], 0, lim.payload),
    }
    ref = liftfirmware.float_current_steps(v.lift, clamped)
    worst = float(np.max(np.abs(out["current"][:, 0] - ref))) * v.lift.current_lsb_a
    assert worst <= fw.bound_a
    outside = (rows[:, 0] != clamped["speed"]) | (rows[:, 1] != clamped["accel"]) | (rows[:, 2] != clamped["payload"])
    assert np.array_equal(out["clamped"] != 0, outside)


@needs_gcc
@pytest.mark.parametrize(("seed", "word"), CASES[:3])
def test_the_generated_lift_c_is_the_emulators_integers(tmp_path, seed, word):
    """<prefix>_lift() compiled on the host (strict flags, -Werror) returns the emulator's current and
    clamp bits on every row."""
    v = _vehicle(seed, word)
    fw = synthesis.synthesise(v)
    assert fw.lift is not None
    write_files(tmp_path, render.render(fw))
    exe = build_harness(tmp_path, v.name, (*interface.CALLS, interface.LIFT))
    rows = _rows(fw.lift, 5_000, seed + 20)
    got = run_harness(exe, rows, "lift")
    want = emulate.run(fw.lift.program, fw.lift.tables, _fields(rows))
    assert np.array_equal(got[:, 0], want["current"][:, 0])
    assert np.array_equal(got[:, 1], want["clamped"])


def test_a_lift_budget_out_of_reach_names_the_key():
    """A budget below half an output step cannot be met: the error names lift.current_budget and the step."""
    from kinetab.generator.errors import CheckFailed

    v = with_lift(WORKED | {"current_budget": "4 mA"})  # half of the 10 mA step is 5 mA
    with pytest.raises(CheckFailed, match=r"lift\.current_budget.*lift\.current_lsb"):
        synthesis.synthesise(v)
