"""Physical properties over random valid vehicles (hypothesis): no source needed beyond mechanics itself.

Symmetric positive-definite mass matrix; M M^-1 = I; gyroscopic forces do no work (q'^T V = 0, a
property of any Coriolis term, common practice); friction and rolling resistance dissipate; the forward
dynamics and the current conversion invert their counterparts.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from kinetab.generator import dynamics, stability
from kinetab.generator.dynamics import OperatingPoint
from kinetab.generator.errors import ModelError

from tests.helpers import demo_doc, random_doc, vehicle_from

SETTINGS = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@st.composite
def vehicles(draw, shape=None):
    pick = lambda lo, hi: draw(st.floats(lo, hi, allow_nan=False, allow_infinity=False))  # noqa: E731
    shape = shape or draw(st.sampled_from(["ramp", "gap"]))
    try:
        v = vehicle_from(random_doc(pick, shape))
        stability.check(v)
    except ModelError:
        assume(False)
    return v


@st.composite
def points(draw, v):
    f = lambda lo, hi: draw(st.floats(lo, hi, allow_nan=False))  # noqa: E731
    env = v.envelope
    return OperatingPoint(
        payload_kg=f(0, v.payload.mass_max_kg),
        speed_right=f(-env.speed_max_mps, env.speed_max_mps),
        speed_left=f(-env.speed_max_mps, env.speed_max_mps),
        accel_right=f(-env.accel_max_mps2, env.accel_max_mps2),
        accel_left=f(-env.accel_max_mps2, env.accel_max_mps2),
        pitch_rad=f(-env.pitch_max_rad, env.pitch_max_rad),
        roll_rad=f(-env.roll_max_rad, env.roll_max_rad),
    )


@SETTINGS
@given(data=st.data())
def test_mass_matrix_symmetric_positive_definite_and_inverse(data):
    v = data.draw(vehicles())
    p = data.draw(st.floats(0, v.payload.mass_max_kg))
    m, minv = dynamics.mass_matrix(v, p), dynamics.inverse_mass_matrix(v, p)
    assert np.allclose(m, m.T, rtol=0, atol=0)
    assert np.all(np.linalg.eigvalsh(m) > 0)
    assert m @ minv == pytest.approx(np.eye(2), abs=1e-12)


@SETTINGS
@given(data=st.data())
def test_coriolis_does_no_work(data):
    v = data.draw(vehicles())
    op = data.draw(points(v))
    vr, vl = dynamics.coriolis(v, op.payload_kg, op.speed_right, op.speed_left)
    body = dynamics.combined(v, op.payload_kg)
    omega = (op.speed_right - op.speed_left) / v.wheels.track_m
    size = abs(body.mass_kg * body.cog_ahead_m) * (omega**2 + abs(omega) / v.wheels.track_m)
    scale = size * (abs(op.speed_right) + abs(op.speed_left)) ** 2  # magnitude of the terms that cancel
    assert abs(vr * op.speed_right + vl * op.speed_left) <= 1e-12 * scale


@SETTINGS
@given(data=st.data())
def test_friction_and_rolling_dissipate(data):
    v = data.draw(vehicles())
    op = data.draw(points(v))
    for speed in (op.speed_right, op.speed_left):
        assert dynamics.drivetrain_friction(v, speed) * speed >= 0
        assert dynamics.rolling_resistance(v, op.payload_kg, op.pitch_rad, op.roll_rad, speed=speed) * speed >= 0


@SETTINGS
@given(data=st.data())
def test_forward_dynamics_inverts_inverse_dynamics(data):
    v = data.draw(vehicles())
    op = data.draw(points(v))
    right, left = dynamics.wheel_forces(v, op)
    ar, al = dynamics.forward_accel(v, op, right.total, left.total)
    scale = v.envelope.accel_max_mps2
    assert (ar, al) == pytest.approx((op.accel_right, op.accel_left), abs=1e-9 * scale)
    for side, speed in ((right, op.speed_right), (left, op.speed_left)):
        current = dynamics.motor_current(v, side.total, speed)
        back = dynamics.force_from_current(v, current, speed)
        assert back == pytest.approx(side.total, rel=1e-12, abs=1e-12)


def test_tiny_speed_does_not_flip_motoring_and_backdriving():
    """Regression: a speed of 5e-324 m/s against a force of -1e-300 N made the product underflow to
    -0.0, which counted as motoring; the choice is made by the signs (wheel drives the motor here). With
    a switch (drive.blend_speed = 0) the back-driving factor applies at once; with a blend band the
    torque there is the motoring one (the band starts at it)."""
    doc = demo_doc()
    doc["drive"]["blend_speed"] = "0 m/s"
    v = vehicle_from(doc)
    force, speed = -1e-300, 5e-324
    blended = vehicle_from(demo_doc())
    motoring = force * blended.wheels.diameter_m / 2 / (blended.drive.gear_ratio * blended.drive.efficiency)
    assert float(dynamics.motor_torque(blended, force, speed)) == pytest.approx(motoring, rel=1e-12)
    r, i = v.wheels.diameter_m / 2, v.drive.gear_ratio
    assert float(dynamics.motor_torque(v, force, speed)) == force * r * v.drive.backdrive_efficiency / i
    current = dynamics.motor_current(v, force, speed)
    assert float(dynamics.force_from_current(v, current, speed)) == pytest.approx(force, rel=1e-12)
