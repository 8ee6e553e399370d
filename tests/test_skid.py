"""Skid-steer layout ([skid]): the turning resistance against an independent Newton-Euler form of the
Kozlowski-Pazderski model, the reduction to a differential drive, model errors, and the firmware.

Sources: K. Kozlowski and D. Pazderski, "Modeling and control of a 4-wheel skid-steering mobile robot",
Int. J. Appl. Math. Comput. Sci. 14(4), 2004 (each wheel's lateral force mu N_i sgn(v_yi), the
kinematic constraint at the instantaneous centre's x, the reduced dynamics in (v_x, omega)); J. Y. Wong,
"Theory of Ground Vehicles" (the uniformly loaded track's moment of lateral resistance mu W l / 4, from
memory). The linear load spread along a side (equal springs under a rigid frame) is common practice.
"""

from __future__ import annotations

import re
from importlib import resources
from pathlib import Path

import numpy as np
import pytest
from kinetab.generator import accuracy, dynamics, emulate, envelope, interface, model, render, synthesis, vectors
from kinetab.generator.errors import CheckFailed, ModelError
from kinetab.hil import campaign, campaigntext, compare, identify, planfile, planner, regressor
from kinetab.hil import fitparams as fp
from kinetab.hil.plant import Plant, PlantOptions

from tests import cortexm
from tests.benchsim import run_plan
from tests.csteps import build_harness, needs_gcc, run_harness, write_files
from tests.helpers import random_doc, run_cli, skid_doc, vehicle_from
from tests.test_identify import changed, float_log

G = 9.80665  # standard gravity (3rd CGPM 1901)
SKID_DEMO = Path(str(resources.files("kinetab.generator.demos").joinpath("bramble.toml")))


def _skid_vehicle(seed: int, wheels: int, motors: int | None = None, name: str = "skid", *, feasible: bool = False):
    """An invented skid-steer that stands (random within plausible ranges, seeded); `feasible`: its
    drive sized 25 % above the envelope's peak current and voltage, and grip enough to spin."""
    rng = np.random.default_rng(seed)
    for _ in range(200):
        draw = lambda lo, hi: float(rng.uniform(lo, hi))  # noqa: E731
        doc = skid_doc(random_doc(draw), draw, wheels=wheels, motors=motors)
        doc["name"] = name
        doc["firmware"]["current_budget"] = "60 mA"
        try:
            v = vehicle_from(doc)
            if feasible:
                current, voltage, _, _ = envelope.corner_peaks(v)
                doc["drive"]["current_limit"] = f"{1.25 * current.value:.4f} A"
                doc["drive"]["supply_voltage"] = f"{1.25 * voltage.value:.4f} V"
                v = vehicle_from(doc)
                if envelope.problems(v):
                    continue
            return doc, v
        except ModelError:
            continue
    raise AssertionError(f"no skid-steer stood in 200 draws (seed {seed})")


def _loads_min_norm(v, payload: float) -> np.ndarray:
    """Per-wheel normal loads of one side on level ground, N: the minimum-norm solution of the two
    equilibrium equations (sum N = W/2 per side, sum N x = W c / 2), which is what equal springs under a
    rigid frame give; solved with numpy's least squares, not with the code under test."""
    body = dynamics.combined(v, payload)
    n, base = int(v.skid.wheels_per_side), v.skid.wheelbase_m
    x = np.array([-base / 2 + j * base / (n - 1) for j in range(n)])
    w = float(body.mass_kg) * G
    a = np.vstack([np.ones(n), x])
    loads, *_ = np.linalg.lstsq(a, np.array([w / 2, w * float(body.cog_ahead_m) / 2]), rcond=None)
    return loads


def _newton_euler_rim_forces(v, payload: float, speeds: np.ndarray, accels: np.ndarray) -> np.ndarray:
    """Rim forces (right, left) on level ground from Newton-Euler about P, written here from the sources:
    the CoG c ahead of P moves at (v, c w) in body axes, so m (v' - c w^2) = net_R + net_L and
    I_P w' + m c v w + M_r = b (net_R - net_L), with M_r = mu s(w) sum over both sides of N_i |x_i| (each
    wheel slides sideways at x_i w against mu N_i, the sign ramped over turn_transition); each rim adds
    its rolling resistance C_rr N_side s(u), its rotating parts and its motors' drivetrain friction."""
    sk, body = v.skid, dynamics.combined(v, payload)
    m, c, i_p = float(body.mass_kg), float(body.cog_ahead_m), float(body.yaw_inertia_kgm2)
    b = v.wheels.track_m / 2
    n = int(sk.wheels_per_side)
    x = np.array([-sk.wheelbase_m / 2 + j * sk.wheelbase_m / (n - 1) for j in range(n)])
    (ur, ul), (ar, al) = speeds, accels
    fwd, yaw = (ur + ul) / 2, (ur - ul) / (2 * b)
    fwd_acc, yaw_acc = (ar + al) / 2, (ar - al) / (2 * b)
    ramp = np.clip(yaw / sk.turn_transition_radps, -1, 1)
    moment_r = sk.lateral_friction * ramp * 2 * np.sum(_loads_min_norm(v, payload) * np.abs(x))
    along = m * (fwd_acc - c * yaw**2)
    turn = i_p * yaw_acc + m * c * fwd * yaw + moment_r
    net = np.array([along / 2 + turn / (2 * b), along / 2 - turn / (2 * b)])
    r = v.wheels.diameter_m / 2
    m_rot = (n * v.wheels.inertia_kgm2 + sk.motors_per_side * v.drive.rotor_inertia_kgm2 * v.drive.gear_ratio**2) / r**2
    out = []
    for k, (u, a) in enumerate(((ur, ar), (ul, al))):
        shape = np.sign(u) * min(1.0, abs(u) / v.friction.deadband_mps)  # 'ramp' deadband (docs/physics.md)
        rolling = v.wheels.rolling_resistance * m * G / 2 * shape
        f = v.friction
        stribeck = f.coulomb_n + (f.breakaway_n - f.coulomb_n) * np.exp(-((u / f.stribeck_speed_mps) ** 2))
        friction = sk.motors_per_side * (stribeck * shape + f.viscous_ns_per_m * u)
        out.append(net[k] + rolling + m_rot * a + friction)
    return np.array(out)


@pytest.mark.parametrize("seed,wheels", [(1, 2), (2, 2), (3, 3), (4, 4), (5, 6)])
def test_rim_forces_equal_an_independent_newton_euler_form_of_the_kozlowski_pazderski_model(seed, wheels):
    doc, v = _skid_vehicle(seed, wheels, motors=1 if seed % 2 else None)
    assert doc["friction"]["deadband_shape"] == "ramp"
    rng = np.random.default_rng(seed + 100)
    for _ in range(40):
        payload = float(rng.uniform(0, v.payload.mass_max_kg))
        speeds = rng.uniform(-v.envelope.speed_max_mps, v.envelope.speed_max_mps, 2)
        if rng.random() < 0.3:  # slow turns, inside the transition of the turning resistance
            speeds[1] = speeds[0] - rng.uniform(-1, 1) * 2 * v.wheels.track_m / 2 * v.skid.turn_transition_radps
        accels = rng.uniform(-v.envelope.accel_max_mps2, v.envelope.accel_max_mps2, 2)
        op = dynamics.OperatingPoint(
            speed_right=speeds[0],
            speed_left=speeds[1],
            accel_right=accels[0],
            accel_left=accels[1],
            pitch_rad=0.0,
            roll_rad=0.0,
            payload_kg=payload,
        )
        right, left = dynamics.wheel_forces(v, op)
        expect = _newton_euler_rim_forces(v, payload, speeds, accels)
        assert [float(right.total), float(left.total)] == pytest.approx(expect, rel=1e-9, abs=1e-9)


def test_turning_resistance_follows_the_normal_load_on_a_slope():
    """Coulomb's law: the sliding force is mu times the normal load, m g cos(pitch) cos(roll) on a slope."""
    _, v = _skid_vehicle(7, 2)
    level = dynamics.turning(v, 10.0, 0.0, 0.0, speed_difference=1.0)[0]
    tilted = dynamics.turning(v, 10.0, 0.1, -0.05, speed_difference=1.0)[0]
    assert float(tilted) == pytest.approx(float(level) * np.cos(0.1) * np.cos(-0.05), rel=1e-12)


@pytest.mark.parametrize("wheels", [2, 3, 4, 5, 6, 7, 8])
def test_the_moment_arm_tends_to_the_uniformly_loaded_track_of_wong(wheels):
    """sum N_i |x_i| = W a; for wheels evenly over l, a = l n / (4 (n - 1)) (n even) or l (n + 1) / (4 n)
    (n odd), summed by hand; both tend to l / 4, Wong's uniformly loaded track (mu W l / 4)."""
    _, v = _skid_vehicle(11, wheels)
    base, n = v.skid.wheelbase_m, wheels
    by_hand = base * n / (4 * (n - 1)) if n % 2 == 0 else base * (n + 1) / (4 * n)
    arm = np.sum(np.abs(dynamics.skid_positions(v))) / n
    assert arm == pytest.approx(by_hand, rel=1e-12)
    assert abs(arm - base / 4) <= base / (4 * (n - 1)) + 1e-12


def test_without_lateral_friction_two_wheels_a_side_are_a_differential_drive_with_doubled_parts():
    """mu_l = 0, two wheels and two motors a side: the rim forces of a differential drive whose wheel,
    rotor and drivetrain friction are doubled (casters rolling like the wheels), and each motor carries
    half the current."""
    doc, _ = _skid_vehicle(21, 2, motors=2)
    doc["skid"]["lateral_friction"] = 0.0
    doc["body"]["cog_ahead"] = doc["payload"]["cog_ahead"] = "-0.05 m"  # stands on either layout
    skid = vehicle_from(doc)
    diff = {k: (dict(x) if isinstance(x, dict) else x) for k, x in doc.items() if k != "skid"}
    diff["casters"] = {"behind_axle": "0.6 m", "rolling_resistance": diff["wheels"]["rolling_resistance"]}
    diff["wheels"]["inertia"] = f"{2 * skid.wheels.inertia_kgm2} kg*m^2"
    diff["drive"]["rotor_inertia"] = f"{2 * skid.drive.rotor_inertia_kgm2} kg*m^2"
    f = skid.friction
    diff["friction"].update(
        coulomb=f"{2 * f.coulomb_n} N", breakaway=f"{2 * f.breakaway_n} N", viscous=f"{2 * f.viscous_ns_per_m} N*s/m"
    )
    two = vehicle_from(diff)
    rng = np.random.default_rng(3)
    n = 500
    op = dynamics.OperatingPoint(
        speed_right=rng.uniform(-1, 1, n),
        speed_left=rng.uniform(-1, 1, n),
        accel_right=rng.uniform(-1, 1, n),
        accel_left=rng.uniform(-1, 1, n),
        pitch_rad=rng.uniform(-0.1, 0.1, n),
        roll_rad=rng.uniform(-0.05, 0.05, n),
        payload_kg=rng.uniform(0, skid.payload.mass_max_kg, n),
    )
    for a, b in zip(dynamics.wheel_forces(skid, op), dynamics.wheel_forces(two, op)):
        np.testing.assert_allclose(a.total, b.total, rtol=1e-12, atol=1e-9)
    # the same rim force needs half the current in each of two motors with the same torque constant
    np.testing.assert_allclose(2 * dynamics.wheel_currents(skid, op), dynamics.wheel_currents(two, op), rtol=1e-12)


def test_model_errors_name_the_key(tmp_path):
    doc, _ = _skid_vehicle(31, 4)
    both = {**doc, "casters": {"behind_axle": "0.4 m", "rolling_resistance": 0.02}}
    with pytest.raises(ModelError, match=r"<test>: casters: expected no \[casters\] section in a skid-steer"):
        vehicle_from(both)
    too_many = {**doc, "skid": {**doc["skid"], "motors_per_side": 5}}
    with pytest.raises(ModelError, match=r"skid.motors_per_side: expected at most skid.wheels_per_side \(4\)"):
        vehicle_from(too_many)
    one = {**doc, "skid": {**doc["skid"], "wheels_per_side": 1}}
    with pytest.raises(ModelError, match=r"skid.wheels_per_side: expected a value >= 2 and <= 8, a whole number"):
        vehicle_from(one)
    tips = {**doc, "body": {**doc["body"], "cog_ahead": f"{doc['skid']['wheelbase']}"}}
    with pytest.raises(ModelError, match=r"body.cog_ahead: expected a centre of gravity within .* of P"):
        vehicle_from(tips)
    no_casters = {k: x for k, x in doc.items() if k != "skid"}
    with pytest.raises(ModelError, match=r"casters: expected a \[casters\] section"):
        vehicle_from(no_casters)


def test_the_envelope_shows_that_spinning_needs_far_more_current_than_driving_straight():
    """Spinning in place drags every wheel sideways: the corner peak is a spin, and a grip too low for
    the turning resistance makes the envelope infeasible, naming the wheel that slips."""
    doc, _ = _skid_vehicle(41, 2)
    doc["skid"]["lateral_friction"] = 0.5
    v = vehicle_from(doc)
    straight = dynamics.OperatingPoint(
        speed_right=0.3, speed_left=0.3, accel_right=0, accel_left=0, pitch_rad=0, roll_rad=0, payload_kg=0
    )
    spin = dynamics.OperatingPoint(
        speed_right=0.3, speed_left=-0.3, accel_right=0, accel_left=0, pitch_rad=0, roll_rad=0, payload_kg=0
    )
    assert abs(dynamics.wheel_currents(v, spin)[0]) > 3 * abs(dynamics.wheel_currents(v, straight)[0])
    current, *_ = envelope.corner_peaks(v)
    right, left = (float(x) for x in re.search(r"speed ([+-][\d.]+)/([+-][\d.]+) m/s", current.where).groups())
    assert right * left < 0, current.where  # the peak is a spin: the wheels turn opposite ways
    doc["wheels"]["grip"] = 0.3
    doc["skid"]["lateral_friction"] = 0.6
    assert any("the wheel slips" in p for p in envelope.problems(vehicle_from(doc)))


def _skid_firmware(seed: int, wheels: int):
    for k in range(20):
        doc, v = _skid_vehicle(seed + 97 * k, wheels)
        try:
            return synthesis.synthesise(v)
        except CheckFailed:
            continue
    raise AssertionError("no invented skid-steer met its 60 mA budget")


@needs_gcc
@pytest.mark.parametrize("seed,wheels", [(51, 2), (52, 4)])
def test_generated_c_is_bit_exact_with_the_emulation_and_within_budget_of_the_float_model(seed, wheels, tmp_path):
    """Host gcc with the strict flags; the float reference includes the turning resistance."""
    fw = _skid_firmware(seed, wheels)
    assert "turn_level" in fw.tables and "turn_shape" in fw.tables
    folder = write_files(tmp_path, render.render(fw))
    exe = build_harness(folder, "skid")
    inp = accuracy.envelope_points(fw, 5000, 11)
    ints = run_harness(exe, interface.fields_to_rows(interface.FF_IN, inp))
    assert np.array_equal(ints[:, :2], emulate.run(fw.design.feedforward, fw.tables, inp)["current"])
    got = ints[:, :2] * fw.vehicle.firmware.current_lsb_a
    ref = accuracy.reference_current(fw, accuracy.operating_point(fw, inp))
    assert np.max(np.abs(got - ref)) <= fw.vehicle.firmware.current_budget_a
    lsb, b = fw.vehicle.firmware.speed_lsb_mps, fw.vehicle.wheels.track_m / 2
    yaw = np.abs(inp["speed"][:, 0] - inp["speed"][:, 1]) * lsb / (2 * b)
    full = yaw > fw.vehicle.skid.turn_transition_radps
    assert 0.05 < np.mean(full) < 0.95  # both full turning resistance and its ramp are exercised


def test_the_fit_coordinates_of_a_skid_steer_rebuild_it_and_its_force_model_is_exact():
    """fitparams: the lateral friction takes the casters' place, values and vehicle_with are inverse, and
    the fit's force model (11 evaluations of the dynamics) equals the dynamics at random coordinates."""
    _, v = _skid_vehicle(61, 3, motors=1, feasible=True)
    assert fp.names(v)[fp.GROUND] == "skid.lateral_friction"
    x0 = fp.values(v)
    assert x0[fp.GROUND] == v.skid.lateral_friction
    again = fp.vehicle_with(v, x0)
    assert again.drive.rotor_inertia_kgm2 == pytest.approx(v.drive.rotor_inertia_kgm2, rel=1e-9)
    plans = [(campaign.plan_for(v, c, duration_s=6, period_s=0.01), c.rig) for c in campaign.candidates(v)[:3]]
    n = 2 * sum(len(p) for p, _ in plans)
    data = regressor.Rows(
        ops=[(dynamics.OperatingPoint(**p.si()), rig) for p, rig in plans],
        measured=np.zeros((n, 2)),
        speed=np.concatenate([np.r_[p.si()["speed_right"], p.si()["speed_left"]] for p, _ in plans]),
        log=np.zeros(n, int),
        sample=np.zeros(n, int),
        how=[],
        weight=np.ones(n),
    )
    fm = regressor.force_model(v, data)
    lo, hi = fp.bounds(v)
    rng = np.random.default_rng(2)
    for _ in range(5):
        x = np.clip(fm.x0 * rng.uniform(0.5, 1.5, len(fm.x0)), lo, hi)
        want = regressor.model_force(fp.vehicle_with(v, x), data)
        assert fm.force(x) == pytest.approx(want, rel=1e-9, abs=1e-9 * np.max(np.abs(want)))


@pytest.mark.slow  # three simulated 20 s logs and a fit (about 20 s)
@pytest.mark.parametrize("seed,wheels,motors", [(71, 2, None), (72, 4, 1)])
def test_the_bench_fit_recovers_a_changed_lateral_friction_from_simulated_logs(seed, wheels, motors):
    """The plant (speed loop, saturating drive, 1 % current noise, quantised encoder) behind an invented
    skid-steer truth 10-30 % off in mass, yaw inertia, Coulomb friction, rolling resistance and lateral
    friction, on the campaign's runs: the fit's lateral friction is within 3 % of the truth or 4 of its
    standard errors, the compare residual falls, and the written model fits the logs better."""
    doc, v = _skid_vehicle(seed, wheels, motors, feasible=True)
    rng = np.random.default_rng(seed)
    names = ("body.mass", "body.yaw_inertia", "friction.coulomb", "wheels.rolling_resistance", "skid.lateral_friction")
    truth, x_true = changed(v, rng, names)
    logs = []
    for k, c in enumerate(campaign.candidates(v)[:3]):
        plan = campaign.plan_for(v, c, duration_s=20, period_s=0.001)
        assert c.rig == "wheels-up" or "spin" in plan.phase  # the runs on the floor spin
        noise = 0.01 * v.drive.current_limit_a
        logs += run_plan(v, truth, plan, rig=c.rig, feedforward=c.rig == "on-floor", noise_a=noise, seed=k)
    result = identify.fit(v, logs)
    for name in names:
        e, true = result.estimates[name], x_true[fp.INDEX[name]]
        assert abs(e.estimate - true) <= max(0.03 * abs(true), 4 * e.se), (name, e, true)
    assert "skid.lateral_friction" in identify.model_changes(result)
    assert result.rms_after_n < 0.5 * result.rms_before_n  # what is left is mostly the current noise
    for log in logs:  # compare takes every log of a skid-steer, the wheels-up one too
        assert compare.compare(v, log)["likely_terms"]


def test_compare_names_the_turning_term_when_only_the_lateral_friction_is_wrong():
    """Float-model logs of a truth whose lateral friction alone is 20 % higher: the residual correlates
    best with the turning term."""
    _, v = _skid_vehicle(91, 2, feasible=True)
    x = fp.values(v)
    x[fp.GROUND] *= 1.2
    truth = fp.vehicle_with(v, x)
    c = campaign.candidates(v)[1]
    plan = campaign.plan_for(v, c, duration_s=20, period_s=0.002)
    assert "spin" in plan.phase
    log = float_log(truth, plan, c.rig, noise=0.0, seed=1)
    assert compare.compare(v, log)["likely_terms"][0]["term"] == "turning"


def test_init_skid_writes_a_skid_steer_that_builds_and_verifies(tmp_path, capsys):
    """`init --skid yard.toml`: the invented skid-steer demo under the file's name; build and verify pass."""
    path = tmp_path / "yard.toml"
    code, out, err = run_cli(["init", "--skid", str(path)], capsys)
    assert code == 0 and "C prefix 'yard'" in out, err
    v = model.load(path)
    assert v.name == "yard" and v.skid is not None and v.casters is None
    code, out, err = run_cli(["build", str(path), "-o", str(tmp_path / "fw")], capsys)
    assert code == 0, err
    code, out, err = run_cli(["verify", str(path), str(tmp_path / "fw")], capsys)
    assert code == 0 and "all 5 checks passed" in out, out + err


@pytest.mark.slow
@pytest.mark.skipif(not cortexm.zig_available(), reason="pip install ziglang")
@pytest.mark.parametrize("target", ["cortex_m0plus", "cortex_m4"])
def test_the_skid_demo_on_cortex_m_gives_the_emulators_integers(target, tmp_path):
    """zig cc with the strict flags for the core, run in unicorn: the golden vectors bit-exact."""
    fw = synthesis.synthesise(model.load(SKID_DEMO))
    write_files(tmp_path, render.render(fw))
    elf = cortexm.compile_elf([tmp_path / "bramble_ff.c"], target, "bramble_feedforward", tmp_path / "ff.elf")
    machine = cortexm.Machine.load(elf, target)
    n = len(interface.FF_IN.columns)
    for row in vectors.feedforward_table(fw, 800):
        out, _ = machine.call(interface.FF_IN.pack(row[:n]), interface.FF_OUT.size)
        assert interface.FF_OUT.unpack(out) == tuple(int(x) for x in row[n:]), row


def test_more_model_errors_name_the_key_and_say_what_is_expected():
    doc, v = _skid_vehicle(33, 2)
    narrow = {**doc, "skid": {**doc["skid"], "turn_transition": "0.0001 rad/s"}}
    with pytest.raises(ModelError, match=r"skid.turn_transition: expected a yaw rate of at least firmware.speed_lsb"):
        vehicle_from(narrow)
    missing = {**doc, "skid": {k: x for k, x in doc["skid"].items() if k != "wheels_per_side"}}
    with pytest.raises(ModelError, match=r"skid.wheels_per_side: expected a bare whole number such as 4"):
        vehicle_from(missing)
    neither = {k: x for k, x in doc.items() if k != "skid"}
    with pytest.raises(ModelError, match=r"casters: expected a \[casters\] section \(or \[skid\] for a skid-steer"):
        vehicle_from(neither)


def test_plans_on_a_slope_drive_straight_and_the_campaign_states_the_room_a_turning_plan_needs():
    """On a ramp a turn would change the pitch and roll the vehicle stands at, so those plans drive
    straight (seeded ones too); on the floor the plan turns and spins, and CAMPAIGN.txt's room to the
    side is where the path goes (checked here on a quarter circle of known radius)."""
    doc, v = _skid_vehicle(34, 2, feasible=True)
    for seed in (None, 5):
        plan = planner.make_plan(
            v, duration_s=20, period_s=0.01, rig="on-floor", pitch=v.envelope.pitch_max_rad, seed=seed
        )
        assert np.array_equal(plan.columns["speed_right"], plan.columns["speed_left"])
    floor = planner.make_plan(v, duration_s=20, period_s=0.01, rig="on-floor")
    assert "spin" in floor.phase
    n, dt, radius, speed = 1000, 0.01, 1.5, 0.4  # a quarter circle to the left at 0.4 m/s: 1.5 m ahead, 1.5 m left
    track, w = v.wheels.track_m, 0.4 / 1.5
    t = np.arange(n) * dt
    quarter = t < (np.pi / 2) / w
    cols = {c: np.zeros(n) for c in planfile.PLAN_COLUMNS}
    cols["t"] = t
    cols["speed_right"] = np.where(quarter, speed + w * track / 2, 0.0)
    cols["speed_left"] = np.where(quarter, speed - w * track / 2, 0.0)
    ahead, behind, side = campaigntext.excursion(planfile.Plan(cols, ["turning"] * n), track)
    assert ahead == pytest.approx(radius, rel=0.01) and side == pytest.approx(radius, rel=0.01) and behind == 0


def test_the_golden_vectors_sit_on_either_side_of_the_turning_tables_edge():
    """Review: the golden vectors' fixed rows reached the speed tables' edges but not the skid-steer's
    turning tables' (indexed by the difference of the wheel speeds): now a row on each side of it."""
    fw = synthesis.synthesise(model.load(SKID_DEMO))
    diff_edges = {
        p.x1 for t in fw.design.specs.values() if t.source == interface.SPEED_DIFFERENCE for p in t.pieces[:-1]
    }
    assert diff_edges and diff_edges <= set(vectors.speed_edges(fw.design))
    speed = [interface.FF_IN.columns.index(c) for c in interface.FF_IN.member("speed").columns]
    rows = vectors.feedforward_table(fw, 0)[:, speed]
    difference = rows[:, 0] - rows[:, 1]
    for edge in diff_edges:
        for value in (edge - 1, edge, edge + 1, -edge):
            assert np.any(difference == value), value


def test_campaign_text_says_what_the_plans_wheel_speeds_do():
    """Regression (a trial): CAMPAIGN.txt said every floor plan "turns and spins", also a short one whose
    wheel speeds were equal throughout. The words now follow the speeds: both signs at once is a spin."""
    n = 10
    cols = {c: np.zeros(n) for c in planfile.PLAN_COLUMNS}
    cols["t"] = np.arange(n) * 0.01
    said = {}
    for name, (right, left) in {"straight": (0.3, 0.3), "turn": (0.4, 0.2), "spin": (0.3, -0.3)}.items():
        cols["speed_right"], cols["speed_left"] = np.full(n, right), np.full(n, left)
        said[name] = campaigntext._path_words(planfile.Plan(dict(cols), ["x"] * n))
    assert said == {"straight": "drives straight, without turning", "turn": "turns", "spin": "turns and spins"}


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_the_simulated_vehicle_coasts_as_an_accurate_ode_solver_integrates_it(seed):
    """A skid-steer spinning down with its motors off (turning resistance through its ramp, friction
    through the deadband): the plant's speeds over 1.5 s equal scipy's solve_ivp (RK45, rtol 1e-10) of
    the same accelerations within 0.02 % of speed_max while it turns. A first-order step lagged these
    speed-dependent forces by half a step, which the fit read as a yaw inertia 1.6 % light (it fails
    here by 3 to 10 times)."""
    from scipy.integrate import solve_ivp

    _, v = _skid_vehicle(seed, 2 + seed % 3, feasible=True)
    plant = Plant(v, PlantOptions(period_s=0.001, rig="on-floor"))
    sp = {name: 0.0 for name in interface.FF_IN.si_names().values()} | {"payload_kg": v.payload.mass_max_kg / 2}
    start = np.array([0.6, -0.5]) * v.envelope.speed_max_mps
    plant.speed = start.copy()

    def rates(_t, u):
        op = dynamics.OperatingPoint(**{**sp, "speed_right": u[0], "speed_left": u[1]})
        return np.array(dynamics.rig_forward_accel(v, op, 0.0, 0.0, rig="on-floor"), float)

    steps = 1500
    got = []
    for _ in range(steps):
        plant.coast(sp)
        got.append(plant.speed.copy())
    t = np.arange(1, steps + 1) * 0.001
    exact = solve_ivp(rates, (0, t[-1]), start, t_eval=t, rtol=1e-10, atol=1e-12, method="RK45").y.T
    moving = np.abs(exact) > 0.05 * v.envelope.speed_max_mps  # while it still turns, before it sticks
    error = np.abs(np.array(got) - exact)[moving]
    assert moving.sum() > 100 and np.max(error) < 2e-4 * v.envelope.speed_max_mps, np.max(error)
    assert plant.step_limit() <= 0.001
