"""Body-frame limits (forward speed and acceleration, yaw rate and acceleration): the region they cut from
the wheel box, the firmware's pair clamp (C against the emulator), feasibility against an independent
Newton-Euler solve at the region's vertices, plans inside the region and the one-line refusals.

The two vehicles below (a small indoor courier and a warehouse tug) are invented for these tests."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import sympy as sp
import sympy.physics.mechanics as me
from hypothesis import given, settings
from hypothesis import strategies as st
from kinetab.generator import dynamics, emulate, envelope, interface, region, render, synthesis, vectors
from kinetab.generator.errors import ModelError
from kinetab.generator.vehicle import Vehicle

from tests.csteps import build_harness, needs_gcc, run_harness, write_files
from tests.helpers import demo_doc, invented, vehicle_from


def courier(limits: bool = True) -> dict:
    """An invented 21-kg indoor courier on a 6 A drive."""
    d = demo_doc()
    d["name"] = "courier"
    d["body"].update(mass="21 kg", cog_ahead="-30 mm", cog_height="140 mm", gyration_radius="160 mm")
    d["payload"].update(mass_max="6 kg", cog_ahead="-40 mm", cog_height="300 mm", gyration_radius="120 mm")
    d["wheels"].update(track="340 mm", diameter="125 mm", inertia="0.0012 kg*m^2", rolling_resistance=0.01, grip=0.7)
    d["casters"].update(behind_axle="300 mm", rolling_resistance=0.015)
    d["drive"].update(
        gear_ratio=20,
        efficiency=0.8,
        backdrive_efficiency=0.75,
        rotor_inertia="60 g*cm^2",
        torque_constant="0.035 N*m/A",
        winding_resistance="0.9 ohm",
        current_limit="6 A",
        supply_voltage="24 V",
    )
    d["friction"].update(
        coulomb="2 N", breakaway="3 N", stribeck_speed="20 mm/s", viscous="1.5 N*s/m", deadband="10 mm/s"
    )
    d["envelope"].update(speed_max="1.6 m/s", accel_max="1.2 m/s^2", pitch_max="4 deg", roll_max="3 deg")
    if limits:
        d["envelope"].update(
            forward_speed_max="1.4 m/s",
            forward_accel_max="0.8 m/s^2",
            yaw_rate_max="60 deg/s",
            yaw_accel_max="120 deg/s^2",
        )
    d["firmware"].update(current_budget="12 mA")
    return d


def tug(limits: bool = True) -> dict:
    """An invented 142-kg tug carrying up to 400 kg on a 40 A drive."""
    d = demo_doc()
    d["name"] = "tug"
    d["body"].update(mass="142 kg", cog_ahead="-80 mm", cog_height="250 mm", gyration_radius="300 mm")
    d["payload"].update(mass_max="400 kg", cog_ahead="-150 mm", cog_height="450 mm", gyration_radius="350 mm")
    d["wheels"].update(track="560 mm", diameter="200 mm", inertia="0.02 kg*m^2", rolling_resistance=0.012, grip=0.8)
    d["casters"].update(behind_axle="600 mm", rolling_resistance=0.02)
    d["drive"].update(
        gear_ratio=28,
        efficiency=0.85,
        backdrive_efficiency=0.8,
        rotor_inertia="350 g*cm^2",
        torque_constant="0.09 N*m/A",
        winding_resistance="0.12 ohm",
        current_limit="40 A",
        supply_voltage="48 V",
    )
    d["friction"].update(
        coulomb="12 N", breakaway="16 N", stribeck_speed="25 mm/s", viscous="8 N*s/m", deadband="10 mm/s"
    )
    d["envelope"].update(speed_max="1.5 m/s", accel_max="0.6 m/s^2", pitch_max="3 deg", roll_max="2 deg")
    if limits:
        d["envelope"].update(
            forward_speed_max="1.2 m/s",
            forward_accel_max="0.4 m/s^2",
            yaw_rate_max="40 deg/s",
            yaw_accel_max="60 deg/s^2",
        )
    d["firmware"].update(mass_lsb="0.5 kg", current_lsb="5 mA", current_budget="80 mA")
    return d


def body_limited(doc: dict, rng: np.random.Generator) -> None:
    """Random body-frame limits within plausible fractions of the wheel limits (a tweak for `invented`)."""
    speed = float(doc["envelope"]["speed_max"].split()[0])
    accel = float(doc["envelope"]["accel_max"].split()[0])
    half_track = float(doc["wheels"]["track"].split()[0]) / 2
    doc["envelope"].update(
        forward_speed_max=f"{rng.uniform(0.3, 0.95) * speed} m/s",
        forward_accel_max=f"{rng.uniform(0.3, 0.95) * accel} m/s^2",
        yaw_rate_max=f"{rng.uniform(0.2, 0.9) * speed / half_track} rad/s",
        yaw_accel_max=f"{rng.uniform(0.2, 0.9) * accel / half_track} rad/s^2",
    )


def test_wheel_speeds_are_the_contact_velocities_of_the_rigid_body():
    """u_R = v + b w, u_L = v - b w: the forward velocity of each drive-wheel contact of a planar body
    moving at v along its x axis and turning at w (sympy.physics.mechanics, Point.v2pt_theory), which is
    what turns the forward and yaw limits into |u_R + u_L| <= 2V and |u_R - u_L| <= 2 b W."""
    v, w, b = sp.symbols("v w b", real=True)
    ground = me.ReferenceFrame("N")
    body = ground.orientnew("B", "Axis", [me.dynamicsymbols("psi"), ground.z])
    body.set_ang_vel(ground, w * ground.z)
    p = me.Point("P")
    p.set_vel(body, 0)
    p.set_vel(ground, v * body.x)
    right, left = p.locatenew("R", -b * body.y), p.locatenew("L", b * body.y)
    u_r = right.v2pt_theory(p, ground, body).dot(body.x)
    u_l = left.v2pt_theory(p, ground, body).dot(body.x)
    assert sp.simplify((u_r + u_l) / 2 - v) == 0
    assert sp.simplify((u_r - u_l) / (2 * b) - w) == 0


def _regions() -> st.SearchStrategy[region.PairRegion]:
    """Small integer regions (steps): any edge, even diagonals, some looser than the box."""
    return st.builds(
        lambda e, s, d: region.PairRegion(edge=e, sum_max=2 * s, diff_max=2 * d).normalised(),
        st.integers(1, 12),
        st.integers(1, 14),
        st.integers(1, 14),
    )


@settings(max_examples=150, deadline=None)
@given(reg=_regions())
def test_pair_clamp_lands_inside_keeps_the_inside_and_the_curvature(reg):
    """Exhaustively over every integer pair up to 3 steps past the box: the clamped pair is inside the
    region and a whole step per wheel; a pair inside is unchanged; clamping twice changes nothing; the
    sum and the difference keep their signs and never grow; their ratio (the path's curvature) is kept
    to within the rounding of a step: |s' d - d' s| <= 2 (|s| + |d|) (truncation and the parity step);
    no wheel changes direction by more than one step (the rule of region.clamp, checked point by point)."""
    span = np.arange(-int(reg.edge) - 3, int(reg.edge) + 4)
    r, lf = (a.ravel() for a in np.meshgrid(span, span))
    cr, cl = region.clamp(r, lf, reg, integer=True)
    assert region.inside(cr, cl, reg).all()
    inside = region.inside(r, lf, reg)
    assert np.array_equal(cr[inside], r[inside]) and np.array_equal(cl[inside], lf[inside])
    again = region.clamp(cr, cl, reg, integer=True)
    assert np.array_equal(again[0], cr) and np.array_equal(again[1], cl)
    br, bl = np.clip(r, -reg.edge, reg.edge), np.clip(lf, -reg.edge, reg.edge)
    s_box, s_new, d_box, d_new = br + bl, cr + cl, br - bl, cr - cl
    for old, new in ((s_box, s_new), (d_box, d_new)):
        assert np.all(np.abs(new) <= np.abs(old)) and np.all(new * old >= 0)
    assert np.all(np.abs(s_new * d_box - d_new * s_box) <= 2 * (np.abs(s_box) + np.abs(d_box)))
    assert np.all(cr * br >= -1) and np.all(cl * bl >= -1)


def test_region_vertices_are_the_polygon_of_the_four_limits():
    """A region cut by both diagonals is an octagon at most; each vertex lies on two of the limits, and
    every pair on a fine grid inside lies in the vertices' convex hull (scipy.spatial.ConvexHull)."""
    from scipy.spatial import ConvexHull

    reg = region.PairRegion(edge=1.0, sum_max=1.5, diff_max=0.8).normalised()
    pts = region.vertices(reg)
    assert 4 <= len(pts) <= 8
    hull = ConvexHull(pts)
    grid = np.array(list(itertools.product(np.linspace(-1.1, 1.1, 45), repeat=2)))
    ins = grid[region.inside(grid[:, 0], grid[:, 1], reg)]
    assert np.all(hull.equations[:, :2] @ ins.T + hull.equations[:, 2:] <= 1e-12)


def _newton_euler_currents(v: Vehicle, speeds, accels, pitch, roll, payload) -> np.ndarray:
    """Motor currents (n, 2) from a Newton-Euler solve in the body frame, written out here (not from
    dynamics' mass matrix): with a = d(v)/dt - c w^2 and the yaw equation about P,
    F_R + F_L = m (v' - c w^2) + m g sin(theta) and b (F_R - F_L) = I_P w' + m c v w + m c g cos(theta)
    sin(phi) (Newton's and Euler's laws for the combined body; F the contact forces). The rim force adds
    the wheel's own reflected inertia, drivetrain friction and rolling resistance (from dynamics: not
    the subject here), and the current follows the motor rule."""
    body = dynamics.combined(v, payload)
    m, c, i_p = body.mass_kg, body.cog_ahead_m, body.yaw_inertia_kgm2
    b, g = v.wheels.track_m / 2, dynamics.G_N
    (ur, ul), (ar, al) = speeds, accels
    fwd, yaw = (ur + ul) / 2, (ur - ul) / (2 * b)
    fwd_acc, yaw_acc = (ar + al) / 2, (ar - al) / (2 * b)
    total = m * (fwd_acc - c * yaw**2) + m * g * np.sin(pitch)
    moment = i_p * yaw_acc + m * c * fwd * yaw + m * c * g * np.cos(pitch) * np.sin(roll)
    contact = (total / 2 + moment / (2 * b), total / 2 - moment / (2 * b))
    out = []
    for f, u, a in zip(contact, (ur, ul), (ar, al)):
        rolling = dynamics.rolling_resistance(v, payload, pitch, roll, speed=u)
        rim = f + dynamics.reflected_mass(v) * a + dynamics.drivetrain_friction(v, u) + rolling
        out.append(dynamics.motor_current(v, rim, u))
    return np.stack(out, -1)


@pytest.mark.parametrize("make", [courier, tug])
def test_body_limits_make_the_invented_vehicles_feasible_checked_by_newton_euler(make):
    """Without body-frame limits both vehicles must spin at full rim speed while accelerating flat out
    (INFEASIBLE); with them both are feasible. The current at every vertex of the two regions, at the
    steepest pitch and roll either way and both payload edges, by the Newton-Euler solve above, stays
    within drive.current_limit and below the envelope's reported peak (which also scans other points)."""
    assert not envelope.analyse(vehicle_from(make(limits=False))).feasible
    v = vehicle_from(make())
    report = envelope.analyse(v)
    assert report.feasible, report.problems
    env = v.envelope
    worst = 0.0
    for sp_pair, ac_pair in itertools.product(
        region.vertices(region.speed_region(v)), region.vertices(region.accel_region(v))
    ):
        for th, ph, p in itertools.product(
            (-env.pitch_max_rad, env.pitch_max_rad), (-env.roll_max_rad, env.roll_max_rad), (0, v.payload.mass_max_kg)
        ):
            cur = _newton_euler_currents(v, sp_pair, ac_pair, th, ph, p)
            worst = max(worst, float(np.max(np.abs(cur))))
    assert worst <= v.drive.current_limit_a
    assert worst <= report.peak_current.value * (1 + 1e-9)
    assert worst >= 0.5 * report.peak_current.value  # the vertices carry the load, not some odd point


def test_without_body_limits_the_region_is_the_box_and_nothing_new_is_emitted():
    """No body-frame key: the region is the wheel box, no pair clamp, no new #define (golden files hold
    the rest byte for byte)."""
    v = vehicle_from(demo_doc())
    fw = synthesis.synthesise(v)
    assert fw.design.limits.speed_pair.is_box and fw.design.limits.accel_pair.is_box
    assert not any(type(op).__name__ == "PairClamp" for op in fw.design.feedforward.ops)
    assert "_SUM_MAX" not in render.render(fw)[f"{v.name}_ff.h"]


@pytest.fixture(scope="module")
def limited():
    """An invented vehicle with random body-frame limits, and its firmware."""
    return invented(4242, "veh", body_limited)


@needs_gcc
def test_compiled_pair_clamp_equals_the_emulator_with_its_bits(limited, tmp_path):
    """The C of a body-limited vehicle (gcc, strict flags) against the emulator on the golden vectors,
    which hold the regions' vertices and many pairs outside them: outputs and clamp bits bit for bit; and
    the bits say which wheel the region moved."""
    _, fw = limited
    assert not fw.design.limits.speed_pair.is_box and not fw.design.limits.accel_pair.is_box
    rows = vectors.feedforward_table(fw, 6000)
    n = len(interface.FF_IN.columns)
    exe = build_harness(write_files(tmp_path, render.render(fw)), "veh")
    assert np.array_equal(run_harness(exe, rows[:, :n]), rows[:, n:])
    assert np.array_equal(run_harness(exe, rows[:, :n], "split"), rows[:, n:])
    inp = interface.rows_to_fields(interface.FF_IN, rows[:, :n])
    lim = fw.design.limits
    box = np.clip(inp["speed"], -lim.speed, lim.speed)
    moved = np.stack(region.clamp(box[:, 0], box[:, 1], lim.speed_pair, integer=True), -1) != box
    bits = emulate.run(fw.design.feedforward, fw.tables, inp)["clamped"]
    for k, column in enumerate(interface.FF_IN.member("speed").columns):
        flagged = (bits >> interface.FEEDFORWARD.clamp_bit(column)) & 1
        outside_box = (inp["speed"][:, k] < -lim.speed) | (inp["speed"][:, k] > lim.speed)
        assert np.array_equal(flagged.astype(bool), moved[:, k] | outside_box)


def test_a_clamped_pair_costs_what_the_float_model_says_at_the_clamped_pair(limited):
    """The firmware evaluates the model at the clamped pair: its current there is within the proven
    budget of the float model at region.clamp's pair (SI), for pairs far outside the region."""
    _, fw = limited
    v, lim = fw.vehicle, fw.design.limits
    rng = np.random.default_rng(3)
    n = 3000
    lo, hi = interface.column_edges(lim, interface.FF_IN)
    rows = np.stack([rng.integers(a, b + 1, n) for a, b in zip(lo, hi)], -1)
    inp = interface.rows_to_fields(interface.FF_IN, rows)
    got = emulate.run(fw.design.feedforward, fw.tables, inp)["current"] * v.firmware.current_lsb_a
    clamped = dict(inp)
    for name, pair in (("speed", lim.speed_pair), ("accel", lim.accel_pair)):
        clamped[name] = np.stack(region.clamp(inp[name][:, 0], inp[name][:, 1], pair, integer=True), -1)
    ref = dynamics.wheel_currents(v, dynamics.OperatingPoint(**interface.to_si(v, interface.FF_IN, clamped)))
    assert np.max(np.abs(got - ref)) <= v.firmware.current_budget_a


def _model_error(doc: dict) -> str:
    with pytest.raises(ModelError) as err:
        vehicle_from(doc)
    return str(err.value)


def test_bad_body_limits_are_one_line_naming_the_key():
    doc = courier()
    doc["envelope"]["yaw_rate_max"] = "2 Hz"  # hertz would pass as 2 rad/s, off by 2 pi
    assert "envelope.yaw_rate_max" in _model_error(doc) and "deg/s" in _model_error(doc)
    doc = courier()
    doc["envelope"]["forward_accel_max"] = "-1 m/s^2"
    assert "envelope.forward_accel_max" in _model_error(doc)
    doc = courier()
    doc["envelope"].update(forward_speed_max="5 mm/s", yaw_rate_max="1 deg/s")  # wheels slower than the deadband
    text = _model_error(doc)
    assert "friction.deadband" in text and "forward_speed_max + yaw_rate_max" in text
    assert "\n" not in text
    doc = courier()
    doc["envelope"]["yaw_rate_max"] = "0.001 deg/s"  # below one speed step at the wheels
    text = _model_error(doc)
    assert text.split(": ")[1].startswith("envelope.yaw_rate_max") and "firmware.speed_lsb" in text
    doc = courier()
    doc["envelope"]["yaw_rate_max"] = "10 rpm"  # an angular speed in one unit
    assert vehicle_from(doc).envelope.yaw_rate_max_radps == pytest.approx(10 * 2 * np.pi / 60)


def test_plans_stay_inside_the_region_and_a_plan_beyond_a_body_limit_names_it(tmp_path):
    """Plans of body-limited invented vehicles keep every row inside both regions; a row pushed past the
    yaw-rate limit is refused naming envelope.yaw_rate_max."""
    from kinetab.hil import planner

    def sized(doc, rng):  # a drive that does not limit the plan: the regions must
        body_limited(doc, rng)
        doc["drive"].update(current_limit="500 A", supply_voltage="1500 V")

    for seed in (5, 6):
        doc, fw = invented(seed, "veh", sized)
        v = fw.vehicle
        plan = planner.make_plan(v, duration_s=30, period_s=0.02, rig="wheels-up")
        c = plan.columns
        for cols, reg in (
            (("speed_right", "speed_left"), region.speed_region(v)),
            (("accel_right", "accel_left"), region.accel_region(v)),
        ):
            assert region.inside(c[cols[0]], c[cols[1]], reg, slack=1e-9).all()
        assert planner.plan_problem(v, plan, "wheels-up") is None
        turn = max(abs(c["speed_right"] - c["speed_left"]) / v.wheels.track_m)
        assert turn > 0.1 * v.envelope.yaw_rate_max_radps  # the plan does turn
    k = len(c["t"]) // 2
    edge = region.speed_region(v).edge
    c["speed_right"][k], c["speed_left"][k] = edge, -edge
    problem = planner.plan_problem(v, plan, "wheels-up")
    assert problem is not None and "envelope.yaw_rate_max" in problem and f"row {k + 2}" in problem


@pytest.mark.slow
@pytest.mark.parametrize("compiler", ["zig", "gcc"])
def test_pair_clamp_on_cortex_m0plus_equals_the_emulator(limited, compiler, tmp_path):
    """The body-limited C on the core without a divider (Cortex-M0+, unicorn): the scaling path's 64-bit
    products and division (library calls there) give the emulator's integers on the golden vectors,
    which are mostly outside the region."""
    from tests import cortexm

    if compiler == "zig" and not cortexm.zig_available():
        pytest.skip("pip install ziglang")
    if compiler == "gcc" and not cortexm.arm_gcc_available():
        pytest.skip("apt install gcc-arm-none-eabi libnewlib-arm-none-eabi")
    _, fw = limited
    write_files(tmp_path, render.render(fw))
    build = cortexm.compile_elf if compiler == "zig" else cortexm.compile_elf_gcc
    elf = build([tmp_path / "veh_ff.c"], "cortex_m0plus", "veh_feedforward", tmp_path / "ff.elf", extra=["-Os"])
    machine = cortexm.Machine.load(elf, "cortex_m0plus")
    n = len(interface.FF_IN.columns)
    rows = vectors.feedforward_table(fw, 1200)
    for row in rows:
        out, _ = machine.call(interface.FF_IN.pack(row[:n]), interface.FF_OUT.size)
        assert interface.FF_OUT.unpack(out) == tuple(int(x) for x in row[n:]), row
