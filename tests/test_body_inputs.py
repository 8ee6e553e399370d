"""Body-frame feed-forward inputs (firmware.inputs = 'body'): the conversion to wheel steps against the
rigid-body kinematics (sympy), its proven deviation, the two forms of one vehicle against each other and
the float model, the C against the emulator (gcc on the host, Cortex-M0+ in unicorn), the command line,
and plans and logs that follow the interface.

Every vehicle here is invented (random within plausible ranges, tests.helpers.invented)."""

from __future__ import annotations

import dataclasses
import json
from fractions import Fraction

import numpy as np
import pytest
import sympy as sp
import sympy.physics.mechanics as me
from kinetab.generator import bodyframe, dynamics, emulate, interface, render, vectors
from kinetab.generator.errors import ModelError, UserError

from tests.csteps import build_harness, needs_gcc, run_harness, write_files
from tests.helpers import invented, invented_feasible, run_cli, to_toml, vehicle_from


def body(doc: dict, _rng: np.random.Generator) -> None:
    """A tweak for `invented`: body-frame inputs with the default steps (one wheel step each)."""
    doc["firmware"]["inputs"] = "body"


def body_odd_steps(doc: dict, rng: np.random.Generator) -> None:
    """Body-frame inputs in steps a firmware team might pick (whole mm/s, mrad/s...), which are not a
    whole number of wheel steps: the conversion rounds."""
    body(doc, rng)
    doc["firmware"].update(
        forward_speed_lsb=f"{rng.choice([0.5, 1.0, 2.0])} mm/s",
        yaw_rate_lsb=f"{rng.choice([1.0, 2.0, 5.0])} mrad/s",
        forward_accel_lsb=f"{rng.choice([1.0, 5.0])} mm/s^2",
        yaw_accel_lsb=f"{rng.choice([2.0, 10.0])} mrad/s^2",
    )


def body_fine_yaw(doc: dict, rng: np.random.Generator) -> None:
    """Body-frame inputs with a yaw-rate step so fine (0.001 mrad/s) that a 32-bit conversion would round
    its constant too coarsely: the 64-bit form."""
    body(doc, rng)
    doc["firmware"]["yaw_rate_lsb"] = "0.001 mrad/s"


def body_limited_odd(doc: dict, rng: np.random.Generator) -> None:
    """Odd body-frame steps on a vehicle with body-frame limits (the forward helper, which takes the
    measured wheel speeds, then clamps its pair into the region)."""
    from tests.test_body_limits import body_limited

    body_limited(doc, rng)
    body_odd_steps(doc, rng)


def body_within_box(doc: dict, rng: np.random.Generator) -> None:
    """Body-frame inputs and body-frame limits that keep every wheel inside its box (V + bW < speed_max,
    the same for accelerations): the C then needs no wheel clamp after the conversion."""
    body(doc, rng)
    speed, accel = (float(doc["envelope"][k].split()[0]) for k in ("speed_max", "accel_max"))
    half_track = float(doc["wheels"]["track"].split()[0]) / 2
    doc["envelope"].update(
        forward_speed_max=f"{0.5 * speed} m/s",
        yaw_rate_max=f"{0.4 * speed / half_track} rad/s",
        forward_accel_max=f"{0.5 * accel} m/s^2",
        yaw_accel_max=f"{0.4 * accel / half_track} rad/s^2",
    )


FORMS = {
    "default": body,
    "odd": body_odd_steps,
    "fine": body_fine_yaw,
    "limited": body_limited_odd,
    "within": body_within_box,
}


@pytest.fixture(scope="module", params=[40, 5])
def pair(request):
    """One invented vehicle in both forms (same document but firmware.inputs): wheel firmware, body firmware."""
    doc, wheel_fw = invented(request.param, "veh")
    doc["firmware"]["inputs"] = "body"
    _, body_fw = invented(request.param, "veh", lambda d, _r: d.update(doc))
    return wheel_fw, body_fw


@pytest.fixture(scope="module", params=[41, 7])
def odd(request):
    return invented(request.param, "veh", body_odd_steps)[1]


def test_one_body_step_is_the_wheel_steps_the_rigid_body_kinematics_give():
    """The contact velocity of each drive wheel of a planar body moving at v and turning at w
    (sympy.physics.mechanics, Point.v2pt_theory): a body step of lsb_v and lsb_w moves the right wheel by
    lsb_v/lsb_u + b lsb_w/lsb_u wheel steps. bodyframe.mix's ratios are those, for several invented steps."""
    v, w, b = sp.symbols("v w b", real=True)
    ground = me.ReferenceFrame("N")
    frame = ground.orientnew("B", "Axis", [me.dynamicsymbols("psi"), ground.z])
    frame.set_ang_vel(ground, w * ground.z)
    p = me.Point("P")
    p.set_vel(ground, v * frame.x)
    right = p.locatenew("R", -b * frame.y).v2pt_theory(p, ground, frame).dot(frame.x)
    for seed in (3, 17):
        fw = invented(seed, "veh", body_odd_steps)[1]
        veh = fw.vehicle
        f = veh.firmware
        subs = {b: veh.wheels.track_m / 2}
        per_v = float(sp.diff(right, v).subs(subs)) * f.forward_speed_lsb_mps / f.speed_lsb_mps
        per_w = float(sp.diff(right, w).subs(subs)) * f.yaw_rate_lsb_radps / f.speed_lsb_mps
        mix = bodyframe.mix(veh, "speed")
        assert mix.r_along == pytest.approx(per_v, rel=1e-12) and mix.r_turn == pytest.approx(per_w, rel=1e-12)
        got_right, got_left = dynamics.wheels_from_body(veh, 0.3, 0.7)
        assert float(got_right) == pytest.approx(float(right.subs({**subs, v: 0.3, w: 0.7})), rel=1e-12)
        assert float(got_left) == pytest.approx(float(right.subs({**subs, v: 0.3, w: -0.7})), rel=1e-12)


def test_default_steps_convert_exactly():
    """With the default steps one body step is one wheel step at each wheel: k = 1, no shift, no deviation,
    32-bit arithmetic; the wheel limits in body steps are the wheel edges (a box region)."""
    fw = invented(40, "veh", body)[1]
    for pair in ("speed", "accel"):
        mix = bodyframe.mix(fw.vehicle, pair)
        assert (mix.k_along, mix.k_turn, mix.shift, mix.wide, mix.deviation()) == (1, 1, 0, False, 0.0)
    lim = fw.design.limits
    assert (lim.forward_speed, lim.yaw_rate, lim.forward_accel, lim.yaw_accel) == (
        lim.speed,
        lim.speed,
        lim.accel,
        lim.accel,
    )


def test_a_rounding_conversion_stays_within_its_proven_deviation(odd):
    """|firmware wheel - exact wheel| <= Mix.deviation for every body input in the clamp box, checked at
    the box's corners and 200,000 random points with exact rational arithmetic (fractions.Fraction of the
    float steps), and the bound is not loose by more than a hundredth of a step plus the constants' own
    rounding."""
    rng = np.random.default_rng(1)
    for pair in ("speed", "accel"):
        mix = bodyframe.mix(odd.vehicle, pair)
        a, t = mix.along_max, mix.turn_max
        along = np.r_[[-a, -a, a, a, 0], rng.integers(-a, a + 1, 200_000)]
        turn = np.r_[[-t, t, -t, t, 0], rng.integers(-t, t + 1, 200_000)]
        right, left = mix.wheels(along, turn)
        ra, rt = Fraction(mix.r_along), Fraction(mix.r_turn)
        worst = Fraction(0)
        for k in np.r_[np.arange(5), np.argsort(-np.abs(along * mix.r_along) - np.abs(turn * mix.r_turn))[:2000]]:
            exact_r = int(along[k]) * ra + int(turn[k]) * rt
            exact_l = int(along[k]) * ra - int(turn[k]) * rt
            worst = max(worst, abs(int(right[k]) - exact_r), abs(int(left[k]) - exact_l))
        float_worst = np.max(np.abs(right - (along * mix.r_along + turn * mix.r_turn)))
        assert float(worst) <= mix.deviation() + 1e-9 and float_worst <= mix.deviation() + 1e-6
        assert mix.deviation() <= max(float(worst), float_worst) + 0.01 + 2**-mix.shift * (a + t)


def test_a_power_of_two_step_has_exact_constants_but_rounds_half_a_step():
    """A forward step of half a wheel step: k = 1, shift 1, so an odd input lands half a wheel step from
    the exact value, and the proven deviation says so (it is not exact)."""

    def half_step(doc: dict, rng: np.random.Generator) -> None:
        body(doc, rng)
        lsb = float(doc["firmware"]["speed_lsb"].split()[0]) / 2
        doc["firmware"]["forward_speed_lsb"] = f"{lsb} {doc['firmware']['speed_lsb'].split()[1]}"

    mix = bodyframe.mix(invented(40, "veh", half_step)[1].vehicle, "speed")
    assert (mix.k_along, mix.k_turn, mix.shift, mix.lossless) == (1, 2, 1, False)
    right, _ = mix.wheels(np.array([3, 4]), np.array([0, 0]))
    assert np.abs(right - np.array([1.5, 2.0])).max() == 0.5 == mix.deviation()


def _same_points(wheel_fw, body_fw, n: int = 20_000) -> tuple[dict, dict]:
    """Random body-frame inputs inside the envelope and the same operating points as wheel inputs."""
    rng = np.random.default_rng(9)
    lim = body_fw.design.limits
    st = interface.ff_in(body_fw.vehicle)
    lo, hi = interface.column_edges(lim, st)
    rows = np.stack([rng.integers(a, b + 1, n) for a, b in zip(lo, hi)], -1)
    body_in = interface.rows_to_fields(st, rows)
    inside = bodyframe.inside(body_fw.vehicle, body_in, {"speed": lim.speed, "accel": lim.accel})
    body_in = {k: x[inside] for k, x in body_in.items()}
    return body_in, bodyframe.wheel_fields(body_fw.vehicle, body_in)


def test_the_two_forms_of_one_vehicle_agree_and_both_hold_the_budget(pair):
    """Default steps: the body-form firmware gives exactly the wheel-form firmware's currents at the same
    operating points (the same tables; the conversion is exact), and both are within the proven bound
    (<= the budget) of the float model evaluated independently at the SI point (dynamics.wheel_currents)."""
    wheel_fw, body_fw = pair
    assert body_fw.tables.keys() == wheel_fw.tables.keys()
    assert all(
        np.array_equal(body_fw.tables[n].pieces[0].entries, wheel_fw.tables[n].pieces[0].entries)
        for n in body_fw.tables
    )
    body_in, wheel_in = _same_points(wheel_fw, body_fw)
    got_body = emulate.run(body_fw.design.feedforward, body_fw.tables, body_in)
    got_wheel = emulate.run(wheel_fw.design.feedforward, wheel_fw.tables, wheel_in)
    assert np.array_equal(got_body["current"], got_wheel["current"]) and not got_body["clamped"].any()
    v, f = body_fw.vehicle, body_fw.vehicle.firmware
    vel = (
        body_in["forward_speed"] * bodyframe.lsb(v, "forward_speed"),
        body_in["yaw_rate"] * bodyframe.lsb(v, "yaw_rate"),
    )
    acc = (
        body_in["forward_accel"] * bodyframe.lsb(v, "forward_accel"),
        body_in["yaw_accel"] * bodyframe.lsb(v, "yaw_accel"),
    )
    (ur, ul), (ar, al) = dynamics.wheels_from_body(v, *vel), dynamics.wheels_from_body(v, *acc)
    op = dynamics.OperatingPoint(
        speed_right=ur,
        speed_left=ul,
        accel_right=ar,
        accel_left=al,
        pitch_rad=body_in["pitch"] * f.angle_lsb_rad,
        roll_rad=body_in["roll"] * f.angle_lsb_rad,
        payload_kg=body_in["payload"] * f.mass_lsb_kg,
    )
    err = np.abs(got_body["current"] * f.current_lsb_a - dynamics.wheel_currents(v, op)).max()
    assert err <= body_fw.ff_bound_a <= f.current_budget_a


def test_a_rounding_conversion_costs_no_more_than_the_model_changes_over_its_deviation(odd):
    """Odd steps: the firmware computes at its own wheel steps (exactly the wheel program there, within
    the proven bound), which lie within Mix.deviation of the exact wheel values; so against the float
    model at the exact point the error is at most the bound plus the model's own change over that
    deviation (evaluated at both ends, float model only)."""
    v, f = odd.vehicle, odd.vehicle.firmware
    body_in, wheel_in = _same_points(odd, odd, 5000)
    got = emulate.run(odd.design.feedforward, odd.tables, body_in)["current"] * f.current_lsb_a
    exact = dynamics.OperatingPoint(**interface.to_si(v, interface.ff_in(v), body_in))
    near = dynamics.OperatingPoint(**interface.to_si(v, interface.FF_IN, wheel_in))
    assert np.abs(got - dynamics.wheel_currents(v, near)).max() <= odd.ff_bound_a
    dev = bodyframe.mix(v, "speed").deviation() * f.speed_lsb_mps
    adev = bodyframe.mix(v, "accel").deviation() * f.accel_lsb_mps2
    spread = np.zeros_like(got)
    for s in (-1, 1):
        for a in (-1, 1):
            moved = dataclasses.replace(
                exact,
                speed_right=exact.speed_right + s * dev,
                speed_left=exact.speed_left - s * dev,
                accel_right=exact.accel_right + a * adev,
                accel_left=exact.accel_left - a * adev,
            )
            spread = np.maximum(spread, np.abs(dynamics.wheel_currents(v, moved) - dynamics.wheel_currents(v, exact)))
    for s in (-1, 1):  # both wheels the same way too
        moved = dataclasses.replace(
            exact, speed_right=exact.speed_right + s * dev, speed_left=exact.speed_left + s * dev
        )
        spread = np.maximum(spread, np.abs(dynamics.wheel_currents(v, moved) - dynamics.wheel_currents(v, exact)))
    assert np.all(np.abs(got - dynamics.wheel_currents(v, exact)) <= odd.ff_bound_a + spread + 1e-12)


def _expected_bits(fw, rows: np.ndarray) -> np.ndarray:
    """The clamp bits by the rule in docs/physics.md, in plain Python integers: an input beyond its edge
    sets its bit; a wheel the conversion put beyond its edge sets both bits of its pair."""
    v, lim = fw.vehicle, fw.design.limits
    st = interface.ff_in(v)
    lo, hi = interface.column_edges(lim, st)
    out = []
    for row in rows.tolist():
        bits = sum(1 << k for k, x in enumerate(row) if not lo[k] <= x <= hi[k])
        clamped = [min(max(x, int(lo[k])), int(hi[k])) for k, x in enumerate(row)]
        for pair, (along, turn) in interface.BODY_PAIRS.items():
            mix, edge = bodyframe.mix(v, pair), getattr(lim, pair)
            ja, jt = st.columns.index(along.name), st.columns.index(turn.name)
            a, t = clamped[ja] * mix.k_along, clamped[jt] * mix.k_turn
            half = (1 << (mix.shift - 1)) if mix.shift else 0
            if any(abs((x + half) >> mix.shift) > edge for x in (a + t, a - t)):
                bits |= (1 << ja) | (1 << jt)
        out.append(bits)
    return np.array(out)


@needs_gcc
@pytest.mark.parametrize("form", FORMS)
def test_compiled_body_form_equals_the_emulator_with_its_clamp_bits(form, tmp_path):
    """The body-form C (gcc, strict flags; exact, rounded in 32 bits, rounded in 64 bits) against the
    emulator on the golden vectors (body corners, beyond every edge, int32 extremes, the wheel cases turned
    into body inputs): currents and clamp bits bit for bit, one-call and two-rate; the bits follow the rule."""
    fw = invented(41, "veh", FORMS[form])[1]
    mix = bodyframe.mix(fw.vehicle, "speed")
    assert (mix.wide, mix.shift > 0) == (form == "fine", form in ("odd", "fine", "limited"))
    assert (form in ("limited", "within")) == (not fw.design.limits.speed_pair.is_box)
    source = render.render(fw)["veh_ff.c"]
    assert ("the body limits keep it within" in source) == (form == "within")
    rows = vectors.feedforward_table(fw, 6000)
    n = len(interface.FF_IN_BODY.columns)
    exe = build_harness(write_files(tmp_path, render.render(fw)), "veh", interface.calls(fw.vehicle))
    assert np.array_equal(run_harness(exe, rows[:, :n]), rows[:, n:])
    assert np.array_equal(run_harness(exe, rows[:, :n], "split"), rows[:, n:])
    assert np.array_equal(rows[:, -1], _expected_bits(fw, rows[:, :n]))
    assert rows[:, -1].any() and not rows[:, -1].all()


@needs_gcc
def test_a_64_bit_conversion_near_the_int32_edge_clamps_before_it_narrows(tmp_path):
    """Wheel edges near 2^30 steps and a forward step of 4.9 wheel steps: a body corner's wheel value is
    beyond int32 before its clamp. The C clamps it in 64 bits, as the emulator does (found in review:
    the C once narrowed first and wrapped)."""

    def huge(doc: dict, rng: np.random.Generator) -> None:
        body(doc, rng)
        top = float(doc["envelope"]["speed_max"].split()[0])
        doc["firmware"]["speed_lsb"] = f"{top / (2**30 - 1.5)!r} m/s"
        doc["firmware"]["forward_speed_lsb"] = f"{4.9 * top / (2**30 - 1.5)!r} m/s"

    fw = invented(41, "veh", huge)[1]
    mix = bodyframe.mix(fw.vehicle, "speed")
    assert mix.wide and mix.along_max * mix.r_along + mix.turn_max * mix.r_turn > 2**31
    rows = vectors.feedforward_table(fw, 3000)
    n = len(interface.FF_IN_BODY.columns)
    exe = build_harness(write_files(tmp_path, render.render(fw)), "veh", interface.calls(fw.vehicle))
    assert np.array_equal(run_harness(exe, rows[:, :n]), rows[:, n:])


@pytest.mark.slow
@pytest.mark.parametrize("form", ["odd", "fine"])
@pytest.mark.parametrize("compiler", ["zig", "gcc"])
def test_body_form_on_cortex_m0plus_equals_the_emulator(compiler, form, tmp_path):
    """The rounding conversions (32-bit, and 64-bit: a library call on a core without a 64-bit multiply)
    on Cortex-M0+ in unicorn: the emulator's integers on the golden vectors."""
    from tests import cortexm

    if compiler == "zig" and not cortexm.zig_available():
        pytest.skip("pip install ziglang")
    if compiler == "gcc" and not cortexm.arm_gcc_available():
        pytest.skip("apt install gcc-arm-none-eabi libnewlib-arm-none-eabi")
    fw = invented(7, "veh", FORMS[form])[1]
    write_files(tmp_path, render.render(fw))
    build = cortexm.compile_elf if compiler == "zig" else cortexm.compile_elf_gcc
    elf = build([tmp_path / "veh_ff.c"], "cortex_m0plus", "veh_feedforward", tmp_path / "ff.elf", extra=["-Os"])
    machine = cortexm.Machine.load(elf, "cortex_m0plus")
    st = interface.FF_IN_BODY
    for row in vectors.feedforward_table(fw, 1000):
        out, _ = machine.call(st.pack(row[: len(st.columns)]), interface.FF_OUT.size)
        assert interface.FF_OUT.unpack(out) == tuple(int(x) for x in row[len(st.columns) :]), row


def test_body_steps_without_body_inputs_or_too_coarse_are_one_line_naming_the_key():
    doc = invented(40, "veh")[0]
    doc["firmware"]["yaw_rate_lsb"] = "1 mrad/s"
    with pytest.raises(ModelError, match=r"firmware\.yaw_rate_lsb.*only with firmware\.inputs = 'body'"):
        vehicle_from(doc)
    doc["firmware"]["inputs"] = "body"
    doc["firmware"]["yaw_rate_lsb"] = "100 rad/s"
    with pytest.raises(ModelError, match=r"firmware\.yaw_rate_lsb.*between 1 and 2\^30 steps"):
        vehicle_from(doc)
    doc["firmware"]["inputs"] = "both"
    with pytest.raises(ModelError, match=r"firmware\.inputs.*'wheels' or 'body'"):
        vehicle_from(doc)


def test_wheels_spelled_out_is_the_default_and_keeps_the_fingerprint():
    from kinetab.generator import synthesis

    doc = invented(40, "veh")[0]
    plain = synthesis.fingerprint(vehicle_from(doc))
    doc["firmware"]["inputs"] = "wheels"
    assert synthesis.fingerprint(vehicle_from(doc)) == plain
    doc["firmware"]["inputs"] = "body"
    assert synthesis.fingerprint(vehicle_from(doc)) != plain


def test_build_and_verify_a_body_form_vehicle(tmp_path, capsys):
    """The command line end to end: the struct, the vectors' columns, verify's report (with the
    conversion's input resolution)."""
    doc = invented_feasible(41, "veh")[0]
    doc["firmware"].update(inputs="body", yaw_rate_lsb="1 mrad/s")  # not a whole number of wheel steps
    path = tmp_path / "veh.toml"
    path.write_text(to_toml(doc))
    out = tmp_path / "fw"
    code, _, err = run_cli(["build", str(path), "-o", str(out), "--vectors", str(out / "vectors.csv")], capsys)
    assert code == 0, err
    header = (out / "veh_ff.h").read_text()
    for member in ("int32_t forward_speed;", "int32_t yaw_rate;", "int32_t forward_accel;", "int32_t yaw_accel;"):
        assert member in header
    assert "int32_t speed[2];" in header  # the forward helper still takes the measured wheel speeds
    assert (out / "vectors.csv").read_text().splitlines()[1].startswith("forward_speed,yaw_rate,forward_accel,")
    code, _, err = run_cli(["verify", str(path), str(out), "--report", str(tmp_path / "r.json")], capsys)
    assert code == 0, err
    res = json.loads((tmp_path / "r.json").read_text())["input_resolution_a"]
    assert set(res) == {*interface.FF_IN_BODY.columns, "conversion"} and res["conversion"] > 0


def test_plans_and_logs_follow_the_interface(tmp_path):
    """A body-form vehicle's plan file has body-frame columns that read back to the same wheel plan; a
    wheel vehicle refuses it naming firmware.inputs, and the other way round; a log written for it has
    body-frame setpoints that read back to the wheel values."""
    from kinetab.hil import benchdata, planfile, planner

    doc, fw = invented(40, "veh", body)
    v = fw.vehicle
    wheel_v = vehicle_from({**doc, "firmware": {k: x for k, x in doc["firmware"].items() if k != "inputs"}})
    plan = planner.make_plan(v, duration_s=5, period_s=0.01, rig="wheels-up")
    path = tmp_path / "plan.csv"
    path.write_text(planfile.to_csv(plan, v))
    assert (
        path.read_text().splitlines()[0] == "t,forward_speed,yaw_rate,forward_accel,yaw_accel,pitch,roll,payload,phase"
    )
    back = planfile.read_plan(path, v)
    for c in planfile.PLAN_COLUMNS:
        assert np.allclose(back.columns[c], plan.columns[c], rtol=1e-8, atol=1e-9)
    with pytest.raises(UserError, match=r"plan\.csv:1: a plan of body-frame inputs.*firmware\.inputs"):
        planfile.read_plan(path, wheel_v)
    (tmp_path / "w.csv").write_text(planfile.to_csv(plan, wheel_v))
    with pytest.raises(UserError, match=r"w\.csv:1: a plan of wheel inputs.*firmware\.inputs"):
        planfile.read_plan(tmp_path / "w.csv", v)
    from kinetab.hil import benchlog, messages, runner

    steps = runner.plan_steps(v, back, path)
    log_path = tmp_path / "log.csv"
    writer = benchlog.LogWriter(log_path, v, back, steps)
    for k in range(len(back)):
        writer.add(
            k,
            messages.Sample(
                seq=k + 1,
                last_rx=k + 1,
                free=8,
                status=messages.STATUS_MEASURED,
                clamped=0,
                ff=(0, 0),
                measured=(0, 0, 0, 0),
            ),
        )
    writer.close()
    log = benchdata.read_log(log_path, "wheels-up", v)
    b, f = v.wheels.track_m / 2, v.firmware  # the plan's own wheel values, to within the body steps
    for pair, lsbs in (("speed", ("forward_speed", "yaw_rate")), ("accel", ("forward_accel", "yaw_accel"))):
        tol = bodyframe.lsb(v, lsbs[0]) / 2 + b * bodyframe.lsb(v, lsbs[1]) / 2 + 1e-9
        for side in interface.SIDES:
            assert np.abs(log.setpoint[f"{pair}_{side}"] - plan.columns[f"{pair}_{side}"]).max() <= tol
    assert np.allclose(log.setpoint["payload_kg"], plan.columns["payload"], atol=f.mass_lsb_kg / 2)
    with pytest.raises(UserError, match=r"log\.csv:1: a log of body-frame setpoints.*firmware\.inputs") as err:
        benchdata.read_log(log_path, "wheels-up", wheel_v)
    assert f"'{wheel_v.name}' takes wheel inputs" in str(err.value)


@needs_gcc
@pytest.mark.slow
def test_plan_simulate_run_with_body_frame_inputs(tmp_path):
    """`bench plan`, `bench simulate` (the generated link and feed-forward C with the body-frame struct),
    `bench run` and `bench compare` as real processes: the plan and the log carry body-frame columns,
    every setpoint is answered, the feed-forward the C computed equals the emulator at the steps the log
    records, and compare reads the log back."""
    import csv
    import subprocess

    from kinetab.generator import model, synthesis

    from tests.test_bench_e2e import KINETAB, ROOT, Sim, _run

    doc = invented_feasible(40, "veh")[0]
    doc["firmware"]["inputs"] = "body"
    path = tmp_path / "veh.toml"
    path.write_text(to_toml(doc))
    plan, log = tmp_path / "plan.csv", tmp_path / "log.csv"
    made = subprocess.run(
        [*KINETAB, "bench", "plan", str(path), "-o", str(plan), "--duration", "6"], cwd=ROOT, capture_output=True
    )
    assert made.returncode == 0, made.stderr
    assert plan.read_text().startswith("t,forward_speed,yaw_rate,")
    sim = Sim(path, "--fifo-depth", "1024", "--watchdog", "1 s")
    run = _run(sim.port, plan, log, model=path)
    _, err = run.communicate(timeout=600)
    assert run.returncode == 0, err
    sim.finish()
    with log.open() as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 6000 and list(rows[0])[3:10] == list(interface.FF_IN_BODY.columns)
    fw = synthesis.synthesise(model.load(path))
    st = interface.ff_in(fw.vehicle)
    si = {c: np.array([float(r[c]) for r in rows]) for c in st.columns}
    steps = {m.name: np.round(si[m.name] / interface.lsb(fw.vehicle, m)).astype(np.int64) for m in st.members}
    want = emulate.run(fw.design.feedforward, fw.tables, steps)["current"]
    amps = np.array([[float(r["ff_current_right"]), float(r["ff_current_left"])] for r in rows])
    assert np.array_equal(np.round(amps / fw.vehicle.firmware.current_lsb_a).astype(np.int64), want)
    assert np.abs(want).max() > 100
    compared = subprocess.run(
        [*KINETAB, "bench", "compare", str(path), str(log)], cwd=ROOT, capture_output=True, text=True
    )  # the simulated vehicle is the model itself: the comparison passes, reading body-frame setpoints
    assert compared.returncode == 0, compared.stdout + compared.stderr


def test_predict_gives_the_body_form_firmware_at_the_point_and_names_body_clamps(tmp_path, capsys):
    """predict's current_fixed for a body-form vehicle is its firmware at the body-frame steps of the
    point (rounded from the SI values, dynamics.body_from_wheels); beyond the yaw limit the warning names
    the body-frame input, not an option the command does not have."""
    from kinetab.generator import model, synthesis

    doc = invented(5, "veh", body_odd_steps)[0]
    path = tmp_path / "veh.toml"
    path.write_text(to_toml(doc))
    v = model.load(path)
    code, out, err = run_cli(
        ["predict", str(path), "--speed-right", "0.21 m/s", "--speed-left", "0.05 m/s", "--payload", "1 kg", "--json"],
        capsys,
    )
    assert code == 0, err
    fw = synthesis.synthesise(v)
    fwd, yaw = dynamics.body_from_wheels(v, 0.21, 0.05)
    steps = {
        "forward_speed": np.floor(fwd / bodyframe.lsb(v, "forward_speed") + 0.5),
        "yaw_rate": np.floor(yaw / bodyframe.lsb(v, "yaw_rate") + 0.5),
        "forward_accel": 0,
        "yaw_accel": 0,
        "pitch": 0,
        "roll": 0,
        "payload": np.floor(1 / v.firmware.mass_lsb_kg + 0.5),
    }
    want = emulate.run(fw.design.feedforward, fw.tables, {k: np.atleast_1d(np.int64(x)) for k, x in steps.items()})
    doc_out = json.loads(out)
    got = [doc_out[side]["current_fixed"] for side in ("right", "left")]
    assert got == pytest.approx(want["current"][0] * v.firmware.current_lsb_a, abs=1e-12)
    top = v.envelope.speed_max_mps
    code, _, err = run_cli(["predict", str(path), "--speed-right", f"{top} m/s", "--speed-left", f"{-top} m/s"], capsys)
    assert code == 0 and "the body-frame" in err and "yaw rate made of the wheel options" in err and "--" not in err


@pytest.mark.parametrize(
    ("form", "name", "key"),
    [
        ("wheels", "pitch", "firmware.angle_lsb"),
        ("wheels", "payload", "firmware.mass_lsb"),
        ("wheels", "accel", "firmware.accel_lsb"),
        ("body", "yaw_rate", "firmware.yaw_rate_lsb"),
        ("body", "forward_accel", "firmware.forward_accel_lsb"),
    ],
)
def test_a_failed_current_step_check_names_the_inputs_own_step_key(form, name, key):
    """verify's advice names the model key that sets the input's step (pitch and roll share angle_lsb,
    payload's is mass_lsb), for either input form."""
    from kinetab.generator import gate, steps

    fw = invented(40, "veh", body if form == "body" else None)[1]
    too_big = steps.NeighbourStep(amps=50.0, at=3, excess=40.0, excess_at=3)
    found = {m.name: steps.NeighbourStep(amps=0.0, at=0) for m in interface.ff_in(fw.vehicle).members}
    check = gate.step_check(fw, {**found, name: too_big})
    assert not check.ok and f"make {key} finer" in check.detail


def test_a_body_frame_plan_beyond_its_limits_names_its_own_columns(tmp_path):
    """bench run's plan check on a body-form vehicle names the body-frame column (and the key or the
    wheel limits behind it), and a wheel it makes beyond the box as that wheel, not a column the file
    does not have (found in review)."""
    from kinetab.hil import planfile, planner

    doc, fw = invented(40, "veh", body)
    v = fw.vehicle
    plan = planner.make_plan(v, duration_s=5, period_s=0.01, rig="wheels-up")
    yaw = bodyframe.limit_si(v, "yaw_rate")
    b = v.wheels.track_m / 2
    spun = planfile.Plan(
        {
            **plan.columns,
            "speed_right": plan.columns["speed_right"] + 1.5 * yaw * b,
            "speed_left": plan.columns["speed_left"] - 1.5 * yaw * b,
        },
        plan.phase,
    )
    text = planner.plan_problem(v, spun, "wheels-up")
    assert text is not None and "speed_left" not in text and "speed_right" not in text
    assert "yaw_rate" in text and "beyond what the wheel limits allow" in text


@needs_gcc
@pytest.mark.slow
def test_a_fit_from_body_frame_logs_recovers_the_truth(tmp_path):
    """Plans, simulated runs against a truth (body mass +15 %, 20 mA current noise) and the fit, for a
    body-form vehicle: the logs' body-frame setpoints read back as the wheel values the fit needs, and
    the fitted mass lands within 3 % of the truth (its own error bars say about 10 %)."""
    import re
    import subprocess

    from kinetab.generator import model

    from tests.test_bench_e2e import KINETAB, ROOT, _bench_log

    doc = invented_feasible(40, "veh")[0]
    doc["firmware"]["inputs"] = "body"
    path = tmp_path / "veh.toml"
    path.write_text(to_toml(doc))
    mass, unit = doc["body"]["mass"].split()
    doc["body"]["mass"] = f"{float(mass) * 1.15} {unit}"
    truth = tmp_path / "truth.toml"
    truth.write_text(to_toml(doc))
    logs = [str(_bench_log(tmp_path, path, truth, rig, rig, seconds=20)) for rig in ("wheels-up", "on-floor")]
    fitted = tmp_path / "fitted.toml"
    done = subprocess.run(
        [*KINETAB, "bench", "fit", str(path), *logs, "--write", str(fitted)], cwd=ROOT, capture_output=True, text=True
    )
    assert done.returncode == 0, done.stderr
    assert "beyond this model's envelope" not in done.stderr  # its own runs: inside every limit it names
    assert re.search(r"^body\.mass .* written(; rests on the held values.*)?$", done.stdout, re.M)
    assert model.load(fitted).body.mass_kg == pytest.approx(model.load(truth).body.mass_kg, rel=0.03)
