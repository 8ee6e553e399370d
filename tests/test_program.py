"""The integer program against the float model: exact decomposition, no wrap, clamping, proven bound."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from kinetab.generator import accuracy, analysis, dynamics, emulate, interface, ops, synthesis
from kinetab.generator import tables as tb

from tests.firmware_fixtures import demo_firmware, demo_unfolded
from tests.helpers import random_firmware_strategy


def _random_inputs(lim, n, rng):
    return {
        "speed": rng.integers(-lim.speed, lim.speed + 1, (n, 2)),
        "accel": rng.integers(-lim.accel, lim.accel + 1, (n, 2)),
        "pitch": rng.integers(-lim.pitch, lim.pitch + 1, n),
        "roll": rng.integers(-lim.roll, lim.roll + 1, n),
        "payload": rng.integers(0, lim.payload + 1, n),
    }


def test_program_algebra_equals_float_model():
    """Run without tables or rounding ("model" mode), the program reproduces dynamics.py to 1e-9 (the
    design that looks the cosines up; the folded one is checked below)."""
    fw = demo_unfolded()
    assert not fw.design.flat
    inp = _random_inputs(fw.design.limits, 20000, np.random.default_rng(3))
    exact = emulate.run(fw.design.feedforward, fw.tables, inp, "model")["current"] * fw.vehicle.firmware.current_lsb_a
    ref = accuracy.reference_current(fw, accuracy.operating_point(fw, inp))
    assert exact == pytest.approx(ref, rel=1e-9, abs=1e-9)


def test_folded_program_algebra_strays_from_the_float_model_by_at_most_the_held_cosines_reach():
    """The demo folds cos(pitch) into roll gravity and cos(pitch) cos(roll) into the rolling level, each
    held at its midrange over the envelope. In "model" mode the program then differs from dynamics.py by
    at most |roll gravity| (1 - cos pitch_max)/2 sin roll_max + |rolling level| (1 - cos pitch_max cos
    roll_max)/2 (trigonometry written here), and by more than nothing."""
    fw = demo_firmware()
    v, lim = fw.vehicle, fw.design.limits
    assert fw.design.flat and "cos_pitch" not in fw.tables
    inp = _random_inputs(lim, 20000, np.random.default_rng(3))
    exact = emulate.run(fw.design.feedforward, fw.tables, inp, "model")["current"] * v.firmware.current_lsb_a
    ref = accuracy.reference_current(fw, accuracy.operating_point(fw, inp))
    pitch, roll = lim.pitch * v.firmware.angle_lsb_rad, lim.roll * v.firmware.angle_lsb_rad
    payload = np.arange(lim.payload + 1) * v.firmware.mass_lsb_kg
    roll_gravity = np.max(np.abs(dynamics.gravity_coefficients(v, payload)[1]))
    rolling = np.max(np.abs(dynamics.rolling_coefficients(v, payload)[0]))
    reach_n = roll_gravity * (1 - np.cos(pitch)) / 2 * np.sin(roll) + rolling * (1 - np.cos(pitch) * np.cos(roll)) / 2
    reach_a = reach_n * dynamics.motor_gain(v)  # motoring: the largest current per newton (back-driving scales it down)
    assert 0 < np.max(np.abs(exact - ref)) <= reach_a + 1e-9


def test_forward_program_algebra_equals_float_forward_dynamics():
    fw = demo_unfolded()
    v = fw.vehicle
    rng = np.random.default_rng(4)
    lim = fw.design.limits
    inp = _random_inputs(lim, 5000, rng)
    op = accuracy.operating_point(fw, inp)
    cur = rng.integers(-lim.current, lim.current + 1, (5000, 2))
    fin = {"current": cur, "speed": inp["speed"], "pitch": inp["pitch"], "roll": inp["roll"], "payload": inp["payload"]}
    lsb = v.firmware.current_lsb_a
    qr = dynamics.force_from_current(v, cur[:, 0] * lsb, op.speed_right)
    ql = dynamics.force_from_current(v, cur[:, 1] * lsb, op.speed_left)
    ref = np.stack(dynamics.forward_accel(v, op, qr, ql), -1)
    got = emulate.run(fw.design.forward, fw.tables, fin, "model")["accel"] * v.firmware.accel_lsb_mps2
    assert got == pytest.approx(ref, rel=1e-9, abs=1e-9)
    for f in (fw, demo_firmware()):  # the proven bound holds with the cosines looked up and folded
        fixed = emulate.run(f.design.forward, f.tables, fin)["accel"] * v.firmware.accel_lsb_mps2
        assert np.max(np.abs(fixed - ref)) <= f.fwd_bound_mps2


def test_error_propagation_rules_on_a_small_program():
    """The bound of clamp -> lookup -> product -> sum -> store, worked by hand: the error of a product
    |A| e_b + |B| e_a + e_a e_b and of a sum e_a + e_b (interval arithmetic; propagated error as in
    Burden & Faires, Numerical Analysis, ch. 1, from memory) plus 1/2 step per rounding shift
    (round to nearest, Oppenheim & Schafer, from memory)."""
    spec = tb.make_spec(
        "t", "x", "none", (tb.Piece(0, 100, lambda x: 3.0 + 0.0 * x),), bits=16, unit="1", meaning="three"
    )
    prog = ops.Program(
        interface.FEEDFORWARD,
        [
            ops.Clamp("x", "pitch", None, -100, 100, 4),
            ops.Lookup("t_x", "t", "x"),
            ops.Mul("p", "t_x", "x", 4),
            ops.Sum("s", ((1, "p"), (-1, "p"))),
            ops.Store("current_right", "current", 0, "s", 2),
        ],
    )
    scale = 2.0**spec.frac_bits
    e_t = 0.25  # table error, target units
    e_p = (100 * e_t * scale) / 2**4 + 0.5  # |x| e_t, x exact, then the rounding of >> 4
    expected = (2 * e_p) / 2**2 + 0.5  # the sum adds both errors; the store rounds again
    bound = analysis.compile_bound(prog, {"t": spec})
    assert float(bound({"t": e_t})) == pytest.approx(expected, rel=1e-15)
    many = bound({"t": np.array([0.0, e_t, 2 * e_t])})  # sizing passes candidate arrays: broadcast
    assert many == pytest.approx([float(bound({"t": x})) for x in (0.0, e_t, 2 * e_t)], rel=1e-15)


def test_demo_measured_error_within_proven_bound_within_budget():
    fw = demo_firmware()
    acc = accuracy.measure(fw, count=100_000)
    assert acc.points >= 100_000
    assert acc.total.max <= fw.ff_bound_a <= fw.vehicle.firmware.current_budget_a


def test_worst_int32_inputs_do_not_wrap():
    fw = demo_firmware()
    big = np.iinfo(np.int32)
    vals = np.array([big.min, big.max, 0, -1, 1])
    grid = np.array(np.meshgrid(vals, vals, vals, vals, vals, vals, vals)).reshape(7, -1).T
    inp = {"speed": grid[:, :2], "accel": grid[:, 2:4], "pitch": grid[:, 4], "roll": grid[:, 5], "payload": grid[:, 6]}
    emulate.run(fw.design.feedforward, fw.tables, inp)  # raises WrapError on any 32-bit overflow
    fin = {
        "current": grid[:, :2],
        "speed": grid[:, 2:4],
        "pitch": grid[:, 4],
        "roll": grid[:, 5],
        "payload": grid[:, 6],
    }
    emulate.run(fw.design.forward, fw.tables, fin)


@pytest.mark.slow  # synthesises 15 random vehicles (8 s)
@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
@given(fw=random_firmware_strategy("larkspur"), seed=st.integers(0, 2**31))
def test_random_models_no_wrap_clamp_and_stay_within_promised_bound(fw, seed):
    rng = np.random.default_rng(seed)
    lim = fw.design.limits
    inp = _random_inputs(lim, 20000, rng)
    got = emulate.run(fw.design.feedforward, fw.tables, inp)  # WrapError would fail the test
    ref = accuracy.reference_current(fw, accuracy.operating_point(fw, inp))
    err = np.max(np.abs(got["current"] * fw.vehicle.firmware.current_lsb_a - ref))
    assert err <= fw.ff_bound_a <= fw.vehicle.firmware.current_budget_a
    assert int(np.max(got["clamped"])) == 0
    big = {
        k: np.where(rng.random(np.shape(a)) < 0.5, np.iinfo(np.int32).max, np.iinfo(np.int32).min)
        for k, a in inp.items()
    }
    out = emulate.run(fw.design.feedforward, fw.tables, big)
    assert np.all(out["clamped"] == 0x7F)


def test_fine_speed_steps_keep_products_in_32_bits_and_the_bound():
    """1 um/s speed steps: d * u would pass 2^31, so both are rounded down first; the bound still holds."""
    from tests.helpers import demo_doc, vehicle_from

    doc = demo_doc()
    doc["firmware"].update(speed_lsb="1 um/s", accel_lsb="0.01 mm/s^2", mass_lsb="1 g")
    fw = synthesis.synthesise(vehicle_from(doc))
    assert any(op.dst.startswith("speed_") and "_s" in op.dst for op in fw.design.feedforward.ops)
    acc = accuracy.measure(fw, count=20_000)
    assert acc.total.max <= fw.ff_bound_a <= fw.vehicle.firmware.current_budget_a
