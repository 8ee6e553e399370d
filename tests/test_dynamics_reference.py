"""Dynamics against outside sources: an independent sympy derivation, published equations, handbook facts."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
import sympy as sp
from kinetab.generator import dynamics, model, units
from kinetab.generator.dynamics import OperatingPoint
from sympy.physics import mechanics as me

from tests.helpers import demo_doc, vehicle_from


def _vehicle(**changes):
    """The demo vehicle with some values changed (`section__key="text with unit"`).

    Physics checks evaluate formulas at chosen points, some on vehicles the loader would refuse as
    statically unstable (a CoG right over the axle): the values are set on a validated vehicle."""
    v = vehicle_from(demo_doc())
    for dotted, text in changes.items():
        sec, key = dotted.split("__")
        spec = model.SCHEMA[sec][key]
        si = units.parse(text, spec.kind) if isinstance(text, str) and not spec.choices else text
        v = dataclasses.replace(v, **{sec: dataclasses.replace(getattr(v, sec), **{spec.field: si})})
    return v


def test_alpha_one_gives_half_mass_per_wheel():
    """alpha = I_P/(m b^2) = 1 => M = (m/2) I: a rule of thumb of the trade (common practice, no source)."""
    # Empty vehicle with its CoG on P: I_P = m r_b^2, so r_b = b gives alpha = 1.
    v = _vehicle(
        body__cog_ahead="0 m",
        body__gyration_radius="210 mm",
        wheels__inertia="0 kg*m^2",
        drive__rotor_inertia="0 kg*m^2",
    )
    m = dynamics.mass_matrix(v, 0.0)
    assert m == pytest.approx(np.array([[19.0, 0.0], [0.0, 19.0]]), rel=1e-12, abs=1e-12)


@pytest.fixture(scope="module")
def kane():
    """Independent derivation: Kane's method (sympy.physics.mechanics) with the no-side-slip constraint.

    Body and payload are separate rigid bodies (no combining formula), wheel and rotor inertias are
    spinning bodies behind the gear ratio, gravity acts at each centre of gravity.
    """
    x, y, psi = me.dynamicsymbols("x y psi")
    u1, u2, u3 = me.dynamicsymbols("u1 u2 u3")
    sym = sp.symbols("m_b m_p c_b c_p r_b r_p b r J_w J_m i g theta phi Q_R Q_L", real=True)
    mb, mp, cb, cp, rb, rp, b, r, jw, jm, i, g, th, ph, qr, ql = sym
    n = me.ReferenceFrame("N")
    frame = n.orientnew("B", "Axis", [psi, n.z])
    origin = me.Point("O")
    origin.set_vel(n, 0)
    pivot = origin.locatenew("P", x * n.x + y * n.y)
    vel, omega = (u1 + u2) / 2, (u1 - u2) / (2 * b)
    kd = [
        x.diff() - (vel * sp.cos(psi) - u3 * sp.sin(psi)),
        y.diff() - (vel * sp.sin(psi) + u3 * sp.cos(psi)),
        psi.diff() - omega,
    ]
    pivot.set_vel(n, vel * frame.x + u3 * frame.y)
    frame.set_ang_vel(n, omega * n.z)
    parts, loads = [], []
    gvec = -g * sp.sin(th) * frame.x - g * sp.cos(th) * sp.sin(ph) * frame.y
    for label, mass, ahead, gyr in (("body", mb, cb, rb), ("pay", mp, cp, rp)):
        cog = pivot.locatenew(label, ahead * frame.x)
        cog.v2pt_theory(pivot, n, frame)
        parts.append(me.RigidBody(label, cog, frame, mass, (me.inertia(frame, 0, 0, mass * gyr**2), cog)))
        loads.append((cog, mass * gvec))
    for label, u, force in (("R", u1, qr), ("L", u2, ql)):
        wheel = me.ReferenceFrame("W" + label)
        wheel.set_ang_vel(n, omega * n.z + (u / r) * frame.y)
        rotor = me.ReferenceFrame("M" + label)
        rotor.set_ang_vel(n, omega * n.z + (i * u / r) * frame.y)
        parts.append(me.RigidBody("w" + label, pivot, wheel, 0, (me.inertia(frame, 0, jw, 0), pivot)))
        parts.append(me.RigidBody("m" + label, pivot, rotor, 0, (me.inertia(frame, 0, jm, 0), pivot)))
        loads.append((wheel, force * r * frame.y))
    km = me.KanesMethod(n, q_ind=[x, y, psi], u_ind=[u1, u2], u_dependent=[u3], kd_eqs=kd, velocity_constraints=[u3])
    km.kanes_equations(parts, loads)
    # u3 = 0 at all times, so only the upper-left 2x2 block and the first two forcing rows matter.
    mass = km.mass_matrix[:2, :2]
    forcing = km.forcing[:2, :].subs(u3, 0)
    return sym, (u1, u2), mass, forcing


def _random_vehicle(rng):
    return _vehicle(
        body__mass=f"{rng.uniform(10, 200)} kg",
        body__cog_ahead=f"{rng.uniform(-0.3, 0.3)} m",
        body__gyration_radius=f"{rng.uniform(0.05, 0.5)} m",
        payload__mass_max=f"{rng.uniform(1, 200)} kg",
        payload__cog_ahead=f"{rng.uniform(-0.3, 0.3)} m",
        payload__gyration_radius=f"{rng.uniform(0.0, 0.5)} m",
        wheels__track=f"{rng.uniform(0.25, 0.8)} m",
        wheels__diameter=f"{rng.uniform(0.05, 0.4)} m",
        wheels__inertia=f"{rng.uniform(0, 0.05)} kg*m^2",
        drive__gear_ratio=rng.uniform(1, 60),
        drive__rotor_inertia=f"{rng.uniform(0, 1e-4)} kg*m^2",
    )


@pytest.mark.parametrize("seed", range(5))
def test_closed_forms_match_kane_derivation(kane, seed):
    """M, V and G equal Kane's equations at random parameters to 1e-9 relative (sympy.physics.mechanics)."""
    rng = np.random.default_rng(seed)
    v = _random_vehicle(rng)
    (mb, mp, cb, cp, rb, rp, b, r, jw, jm, i, g, th, ph, qr, ql), (u1, u2), mass, forcing = kane
    p = rng.uniform(0, v.payload.mass_max_kg)
    sr, sl = rng.uniform(-2, 2, 2)
    pitch, roll = rng.uniform(-0.5, 0.5, 2)
    subs = {
        mb: v.body.mass_kg,
        mp: p,
        cb: v.body.cog_ahead_m,
        cp: v.payload.cog_ahead_m,
        rb: v.body.gyration_radius_m,
        rp: v.payload.gyration_radius_m,
        b: v.wheels.track_m / 2,
        r: v.wheels.diameter_m / 2,
        jw: v.wheels.inertia_kgm2,
        jm: v.drive.rotor_inertia_kgm2,
        i: v.drive.gear_ratio,
        g: 9.80665,
        th: pitch,
        ph: roll,
        qr: 0,
        ql: 0,
        u1: sr,
        u2: sl,
    }
    m_ref = np.array(mass.subs(subs).evalf(30), dtype=float)
    f_ref = np.array(forcing.subs(subs).evalf(30), dtype=float).ravel()  # = -(V + G) with Q = 0
    assert dynamics.mass_matrix(v, p) == pytest.approx(m_ref, rel=1e-9)
    vr, vl = dynamics.coriolis(v, p, sr, sl)
    gr, gl = dynamics.gravity(v, p, pitch, roll)
    assert np.array([vr + gr, vl + gl]) == pytest.approx(-f_ref, rel=1e-9, abs=1e-9 * np.abs(f_ref).max())
    # Separate the two: with gravity off the forcing is -V alone.
    f_cor = np.array(forcing.subs({**subs, g: 0}).evalf(30), dtype=float).ravel()
    assert np.array([vr, vl]) == pytest.approx(-f_cor, rel=1e-9, abs=1e-12)


def _dhaouadi(v, payload):
    """Dhaouadi & Abu Hatab (2013), Adv. Robot. Autom. 2:107, wheel-angle coordinates (docs/references.md).

    Their m_c*d is our combined m*c (wheel masses sit on the axle), I is the yaw inertia about A = P,
    and I_w is the wheel inertia including the reflected rotor.
    """
    body = dynamics.combined(v, payload)
    m, inertia, big_l, big_r = body.mass_kg, body.yaw_inertia_kgm2, v.wheels.track_m / 2, v.wheels.diameter_m / 2
    iw = v.wheels.inertia_kgm2 + v.drive.rotor_inertia_kgm2 * v.drive.gear_ratio**2
    m11 = iw + big_r**2 * (m * big_l**2 + inertia) / (4 * big_l**2)
    m12 = big_r**2 * (m * big_l**2 - inertia) / (4 * big_l**2)
    return m, inertia, big_l, big_r, iw, m11, m12, m * body.cog_ahead_m


@pytest.mark.parametrize("payload", [0.0, 25.0, 60.0])
def test_mass_matrix_matches_dhaouadi_abu_hatab(payload):
    """M in wheel angles = R^2 * (our rim-distance M); check identities M11 +- M12 (Dhaouadi & Abu Hatab 2013)."""
    v = _vehicle()
    m, inertia, big_l, big_r, iw, m11, m12, _ = _dhaouadi(v, payload)
    ours = dynamics.mass_matrix(v, payload) * big_r**2
    assert ours[0, 0] == pytest.approx(m11, rel=1e-12) and ours[1, 1] == pytest.approx(m11, rel=1e-12)
    assert ours[0, 1] == pytest.approx(m12, rel=1e-12) and ours[1, 0] == pytest.approx(m12, rel=1e-12)
    assert ours[0, 0] + ours[0, 1] == pytest.approx(iw + big_r**2 * m / 2, rel=1e-12)
    assert ours[0, 0] - ours[0, 1] == pytest.approx(iw + big_r**2 * inertia / (2 * big_l**2), rel=1e-12)


def test_coriolis_matches_dhaouadi_abu_hatab():
    """V = [[0, R^2 m_c d w/(2L)], [-R^2 m_c d w/(2L), 0]] * wheel rates, divided by R (torque -> rim force)."""
    v = _vehicle()
    _, _, big_l, big_r, _, _, _, mcd = _dhaouadi(v, 40.0)
    sr, sl = 0.7, -0.2
    w = (sr - sl) / (2 * big_l)
    rate_r, rate_l = sr / big_r, sl / big_r
    tau_r = big_r**2 * mcd * w / (2 * big_l) * rate_l
    tau_l = -(big_r**2) * mcd * w / (2 * big_l) * rate_r
    vr, vl = dynamics.coriolis(v, 40.0, sr, sl)
    assert (vr, vl) == pytest.approx((tau_r / big_r, tau_l / big_r), rel=1e-12)


def test_no_offset_no_coriolis_and_spin_in_place():
    """d = 0 => V = 0; spinning in place at constant w needs tau_R + tau_L = -R m_c d w^2 (Dhaouadi & Abu Hatab)."""
    centred = _vehicle(body__cog_ahead="0 m", payload__cog_ahead="0 m")
    assert dynamics.coriolis(centred, 30.0, 0.9, -0.4) == pytest.approx((0.0, 0.0), abs=1e-15)
    v = _vehicle()
    _, _, big_l, big_r, _, _, _, mcd = _dhaouadi(v, 30.0)
    spin = 0.5
    vr, vl = dynamics.coriolis(v, 30.0, spin, -spin)
    w = 2 * spin / (2 * big_l)
    assert big_r * (vr + vl) == pytest.approx(-big_r * mcd * w**2, rel=1e-12)


def test_parallel_axis_theorem():
    """I_P = sum m (k^2 + d^2) (Steiner; Meriam & Kraige App. B [memory]; J. O. Smith, PASP [read])."""
    v = _vehicle()
    body = dynamics.combined(v, 20.0)
    expected = 38.0 * (0.23**2 + 0.05**2) + 20.0 * (0.20**2 + 0.06**2)
    assert body.yaw_inertia_kgm2 == pytest.approx(expected, rel=1e-12)
    assert body.cog_ahead_m == pytest.approx((38.0 * -0.05 + 20.0 * -0.06) / 58.0, rel=1e-12)


def test_standard_gravity():
    """g_n = 9.80665 m/s^2 exactly (3rd CGPM 1901; NIST SP 330)."""
    assert dynamics.G_N == 9.80665
    v = _vehicle()
    grade = math.atan(0.10)  # 10 % grade = 5.7106 deg (atan, run)
    assert math.degrees(grade) == pytest.approx(5.7106, abs=1e-4)
    gr, gl = dynamics.gravity(v, 0.0, grade, 0.0)
    assert gr + gl == pytest.approx(38.0 * 9.80665 * math.sin(grade), rel=1e-12)


def test_torque_constant_equals_back_emf_constant_in_si():
    """k_t [N*m/A] = k_e [V*s/rad]; k_e = 60/(2 pi Kv) from a speed constant in rpm/V (motor-constant relations)."""
    assert units.parse("0.058 N*m/A", units.TORQUE_CONSTANT) == pytest.approx(
        units.parse("0.058 V*s/rad", units.TORQUE_CONSTANT), rel=1e-15
    )
    kv_rpm_per_v = 165.0
    ke = 60 / (2 * math.pi * kv_rpm_per_v)
    doc = demo_doc()
    doc["drive"]["torque_constant"] = f"{ke} V*s/rad"
    v = vehicle_from(doc)
    speed = 0.6  # m/s at the rim, no load current
    motor_rpm = v.drive.gear_ratio * speed / (v.wheels.diameter_m / 2) * 60 / (2 * math.pi)
    assert dynamics.motor_voltage(v, 0.0, speed) == pytest.approx(motor_rpm / kv_rpm_per_v, rel=1e-12)


def test_reflected_inertia_matches_drive_engineering_formula():
    """J i^2/r^2 (Nise, gear trains [memory]) against J_red = 91.2 m (v/n)^2 read backwards (formula sheets)."""
    v = _vehicle(wheels__inertia="0 kg*m^2")
    speed = 1.0  # m/s
    motor_rpm = v.drive.gear_ratio * speed / (v.wheels.diameter_m / 2) * 60 / (2 * math.pi)
    mass_equivalent = v.drive.rotor_inertia_kgm2 * motor_rpm**2 / (91.189 * speed**2)
    assert dynamics.reflected_mass(v) == pytest.approx(mass_equivalent, rel=2e-4)  # 91.2 = (60/2pi)^2 rounded
    exact = (60 / (2 * math.pi)) ** 2
    assert dynamics.reflected_mass(v) == pytest.approx(
        v.drive.rotor_inertia_kgm2 * motor_rpm**2 / (exact * speed**2), rel=1e-12
    )


def test_stribeck_check_values_canudas_de_wit_1995():
    """Table I of Canudas de Wit et al. (1995): F_C 1 N, F_S 1.5 N, v_s 1 mm/s, sigma_2 0.4 N*s/m."""
    v = _vehicle(
        friction__coulomb="1 N",
        friction__breakaway="1.5 N",
        friction__stribeck_speed="0.001 m/s",
        friction__viscous="0.4 N*s/m",
        friction__deadband="1e-8 m/s",
        friction__deadband_shape="gap",
        firmware__speed_lsb="1e-9 m/s",
    )
    assert float(dynamics.drivetrain_friction(v, 1.0001e-8)) == pytest.approx(1.5, abs=1e-5)  # F(0+)
    assert float(dynamics.drivetrain_friction(v, 0.001)) == pytest.approx(1.18434, abs=5e-6)
    assert float(dynamics.drivetrain_friction(v, -0.001)) == pytest.approx(-1.18434, abs=5e-6)


def test_rolling_resistance_from_wheel_loads_on_the_level():
    """On the level, N_drive = m g (c + L_c)/L_c by moments about the caster line (statics, common practice)."""
    v = _vehicle()
    drive, caster = dynamics.wheel_loads(v, 0.0, 0.0, 0.0)
    assert drive == pytest.approx(38.0 * 9.80665 * (0.42 - 0.05) / 0.42, rel=1e-12)
    assert drive + caster == pytest.approx(38.0 * 9.80665, rel=1e-12)
    rolling = dynamics.rolling_resistance(v, 0.0, 0.0, 0.0, speed=0.5)
    assert rolling == pytest.approx(0.012 * drive / 2 + 0.02 * caster / 2, rel=1e-12)


def test_motor_direction_rule():
    """Motoring divides by eta, back-driving multiplies by eta_back (gear-drive technical data sheets)."""
    v = _vehicle()
    r, i = v.wheels.diameter_m / 2, v.drive.gear_ratio
    assert dynamics.motor_torque(v, 100.0, 0.5) == pytest.approx(100 * r / (i * 0.85), rel=1e-12)
    assert dynamics.motor_torque(v, 100.0, 0.0) == pytest.approx(100 * r / (i * 0.85), rel=1e-12)
    assert dynamics.motor_torque(v, -100.0, 0.5) == pytest.approx(-100 * r * 0.80 / i, rel=1e-12)
    op = OperatingPoint(
        speed_right=0.3, speed_left=0.3, accel_right=0.0, accel_left=0.0, pitch_rad=0.0, roll_rad=0.0, payload_kg=0.0
    )
    right, _ = dynamics.wheel_forces(v, op)
    assert right.total == pytest.approx(right.friction + right.rolling, rel=1e-12)
