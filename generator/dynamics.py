"""Floating-point rigid-body dynamics of the vehicle in rim-distance wheel coordinates (docs/physics.md).

Every function takes numpy-broadcastable arrays, so the same code evaluates one operating point for
`predict` and a hundred thousand for the error analysis. Index 0 is the right wheel, 1 the left.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .vehicle import Vehicle

G_N = 9.80665  # standard gravity, m/s^2 (3rd CGPM 1901, exact)

Array = NDArray[np.float64]


@dataclass(frozen=True)
class Combined:
    """Body plus payload as one rigid body, SI units; fields broadcast with the payload array."""

    mass_kg: Array
    cog_ahead_m: Array
    cog_height_m: Array
    yaw_inertia_kgm2: Array  # about the vertical axis through P (Steiner)


@dataclass(frozen=True, kw_only=True)
class OperatingPoint:
    """One or many operating points: rim speeds m/s, rim accelerations m/s^2, angles rad, payload kg.

    Built by keyword only; its fields are the SI names of the feed-forward inputs in the order of the
    firmware struct (interface.FF_IN), which a test holds them to."""

    speed_right: ArrayLike
    speed_left: ArrayLike
    accel_right: ArrayLike
    accel_left: ArrayLike
    pitch_rad: ArrayLike
    roll_rad: ArrayLike
    payload_kg: ArrayLike


@dataclass(frozen=True)
class WheelForces:
    """Longitudinal force terms at one side's rim, N (Q = M q'' + V + F + R + G + T); a skid-steer's
    side is all its wheels together, and T its share of the turning resistance (0 on two drive wheels
    and casters)."""

    inertia: Array
    coriolis: Array
    friction: Array
    rolling: Array
    gravity: Array
    turning: Array

    @property
    def total(self) -> Array:
        return self.inertia + self.coriolis + self.friction + self.rolling + self.gravity + self.turning


def half_track(v: Vehicle) -> float:
    return v.wheels.track_m / 2


def wheels_from_body(v: Vehicle, forward: ArrayLike, yaw: ArrayLike) -> tuple[Array, Array]:
    """Rim values (right, left) of a forward value of P and a yaw value (speeds m/s and rad/s, or their
    rates): u_R = u + b w, u_L = u - b w (docs/physics.md)."""
    u, w = np.asarray(forward, dtype=float), np.asarray(yaw, dtype=float)
    return u + half_track(v) * w, u - half_track(v) * w


def body_from_wheels(v: Vehicle, right: ArrayLike, left: ArrayLike) -> tuple[Array, Array]:
    """The inverse of wheels_from_body: (forward, yaw) = ((u_R + u_L)/2, (u_R - u_L)/(2b))."""
    r, lf = np.asarray(right, dtype=float), np.asarray(left, dtype=float)
    return (r + lf) / 2, (r - lf) / (2 * half_track(v))


def wheel_radius(v: Vehicle) -> float:
    return v.wheels.diameter_m / 2


def combined(v: Vehicle, payload_kg: ArrayLike) -> Combined:
    """Combine body and payload; yaw inertia about P by the parallel-axis theorem."""
    p = np.asarray(payload_kg, dtype=float)
    b, q = v.body, v.payload
    m = b.mass_kg + p
    c = (b.mass_kg * b.cog_ahead_m + p * q.cog_ahead_m) / m
    h = (b.mass_kg * b.cog_height_m + p * q.cog_height_m) / m
    inertia = b.mass_kg * (b.gyration_radius_m**2 + b.cog_ahead_m**2) + p * (q.gyration_radius_m**2 + q.cog_ahead_m**2)
    return Combined(mass_kg=m, cog_ahead_m=c, cog_height_m=h, yaw_inertia_kgm2=inertia)


def wheels_per_side(v: Vehicle) -> int:
    """Driven wheels on each side: skid.wheels_per_side, 1 for two drive wheels and casters."""
    return 1 if v.skid is None else int(v.skid.wheels_per_side)


def motors_per_side(v: Vehicle) -> int:
    """Motors on each side, all given the same current: skid.motors_per_side, else 1."""
    return 1 if v.skid is None else int(v.skid.motors_per_side)


def reflected_mass(v: Vehicle) -> float:
    """Equivalent rim mass of one side's rotating parts, kg: n J_wheel/r^2 + n_m J_rotor i^2/r^2 with n
    wheels and n_m motors per side (1 and 1 on two drive wheels)."""
    r = wheel_radius(v)
    wheels = wheels_per_side(v) * v.wheels.inertia_kgm2
    return (wheels + motors_per_side(v) * v.drive.rotor_inertia_kgm2 * v.drive.gear_ratio**2) / r**2


def mass_matrix_entries(v: Vehicle, payload_kg: ArrayLike) -> tuple[Array, Array]:
    """The two unique entries (M11 = M22, M12 = M21) of the mass matrix, kg."""
    body = combined(v, payload_kg)
    b = half_track(v)
    alpha = body.yaw_inertia_kgm2 / (body.mass_kg * b**2)
    diag = body.mass_kg / 4 * (1 + alpha) + reflected_mass(v)
    off = body.mass_kg / 4 * (1 - alpha)
    return diag, off


def mass_matrix(v: Vehicle, payload_kg: ArrayLike) -> Array:
    """M (..., 2, 2), kg, rim-distance coordinates, right then left."""
    d, o = mass_matrix_entries(v, payload_kg)
    return np.stack([np.stack([d, o], -1), np.stack([o, d], -1)], -2)


def inverse_mass_matrix_entries(v: Vehicle, payload_kg: ArrayLike) -> tuple[Array, Array]:
    """The two unique entries of M^-1, 1/kg (closed form of a symmetric 2x2 inverse)."""
    d, o = mass_matrix_entries(v, payload_kg)
    det = d * d - o * o
    return d / det, -o / det


def inverse_mass_matrix(v: Vehicle, payload_kg: ArrayLike) -> Array:
    d, o = inverse_mass_matrix_entries(v, payload_kg)
    return np.stack([np.stack([d, o], -1), np.stack([o, d], -1)], -2)


def coriolis_coefficient(v: Vehicle, payload_kg: ArrayLike) -> Array:
    """K = m c / (4 b^2), kg/m: the centrifugal/Coriolis forces are V_R = K (u_R - u_L) u_L and
    V_L = -K (u_R - u_L) u_R (V = -m c w^2/2 +- m c v w/(2b), multiplied out)."""
    body = combined(v, payload_kg)
    b = half_track(v)
    return body.mass_kg * body.cog_ahead_m / (4 * b * b)


def coriolis(v: Vehicle, payload_kg: ArrayLike, speed_right: ArrayLike, speed_left: ArrayLike) -> tuple[Array, Array]:
    """Centrifugal/Coriolis rim forces of an offset CoG, N: V = -m c w^2/2 +- m c v w/(2b)."""
    k = coriolis_coefficient(v, payload_kg)
    ur, ul = np.asarray(speed_right, float), np.asarray(speed_left, float)
    turn = ur - ul
    return k * turn * ul, -k * turn * ur


def gravity_coefficients(v: Vehicle, payload_kg: ArrayLike) -> tuple[Array, Array]:
    """(m g / 2, m c g / (2 b)), N: per-wheel gravity is the first times sin(pitch), plus (right) or
    minus (left) the second times cos(pitch) sin(roll)."""
    body = combined(v, payload_kg)
    moment = body.mass_kg * body.cog_ahead_m
    return 0.5 * (body.mass_kg * G_N), moment * G_N / (2 * half_track(v))


def rolling_coefficients(v: Vehicle, payload_kg: ArrayLike) -> tuple[Array, Array]:
    """(level, transfer), N: per-wheel rolling resistance is level cos(pitch) cos(roll) - transfer
    sin(pitch), times the deadband shape. From the static loads (wheel_loads) with half of each
    caster's resistance referred to each drive wheel:
    level = g/2 ((C_w - C_c)(m c + m L_c)/L_c + C_c m), transfer = g/2 (C_w - C_c) m h / L_c.
    A skid-steer's wheels carry the whole weight: level = C_w m g / 2 per side, transfer = 0."""
    body = combined(v, payload_kg)
    m = body.mass_kg
    if v.casters is None:
        return 0.5 * G_N * v.wheels.rolling_resistance * m, np.zeros(np.shape(m))
    lc, cw, cc = v.casters.behind_axle_m, v.wheels.rolling_resistance, v.casters.rolling_resistance
    level = 0.5 * G_N * ((cw - cc) * (m * body.cog_ahead_m + m * lc) / lc + cc * m)
    transfer = 0.5 * G_N * (cw - cc) * (m * body.cog_height_m) / lc
    return level, transfer


def deadband_inside(v: Vehicle, speed: ArrayLike) -> Array:
    """s(u) for 0 <= u <= deadband, continued smoothly beyond it: u/deadband ('ramp') or 0 ('gap')."""
    u = np.asarray(speed, dtype=float)
    if v.friction.deadband_shape == "ramp":
        return u / v.friction.deadband_mps
    return np.zeros(np.shape(u))


def deadband_shape(v: Vehicle, speed: ArrayLike) -> Array:
    """s(u): 'ramp' sign(u)*min(1, |u|/deadband); 'gap' sign(u)*[|u| > deadband]."""
    u = np.asarray(speed, dtype=float)
    a = np.abs(u)
    return np.sign(u) * np.where(a > v.friction.deadband_mps, 1.0, deadband_inside(v, a))


def stribeck_level(v: Vehicle, speed: ArrayLike) -> Array:
    """F_c + (F_s - F_c) exp(-(u/v_s)^2), N: the friction level before the deadband shape."""
    u = np.asarray(speed, dtype=float)
    f = v.friction
    return f.coulomb_n + (f.breakaway_n - f.coulomb_n) * np.exp(-((u / f.stribeck_speed_mps) ** 2))


def friction_force(v: Vehicle, speed: ArrayLike, shape: ArrayLike) -> Array:
    """Stribeck level times a given deadband shape value plus viscous friction, N, of all the motors'
    drivetrains on a side ([friction] describes one)."""
    u = np.asarray(speed, dtype=float)
    one = stribeck_level(v, u) * np.asarray(shape, dtype=float) + v.friction.viscous_ns_per_m * u
    return motors_per_side(v) * one


def drivetrain_friction(v: Vehicle, speed: ArrayLike) -> Array:
    """F(u) = [F_c + (F_s - F_c) exp(-(u/v_s)^2)] s(u) + b_v u per wheel at the rim, N."""
    return friction_force(v, speed, deadband_shape(v, speed))


def wheel_loads(v: Vehicle, payload_kg: ArrayLike, pitch_rad: ArrayLike, roll_rad: ArrayLike) -> tuple[Array, Array]:
    """Static normal loads (both drive wheels together, all casters together), N; a skid-steer's driven
    wheels carry the whole normal load, and its casters none.

    Moments about the caster contact line; dynamic load transfer from acceleration is neglected.
    """
    body = combined(v, payload_kg)
    th, ph = np.asarray(pitch_rad, float), np.asarray(roll_rad, float)
    if v.casters is None:
        normal = body.mass_kg * G_N * np.cos(th) * np.cos(ph)
        return normal, np.zeros(np.shape(normal))
    lc = v.casters.behind_axle_m
    weight = body.mass_kg * G_N
    upright = np.cos(th) * np.cos(ph)
    drive = weight * (upright * (body.cog_ahead_m + lc) - np.sin(th) * body.cog_height_m) / lc
    return drive, weight * upright - drive


def lateral_margin(v: Vehicle, payload_kg: ArrayLike, roll_rad: ArrayLike) -> Array:
    """b cos(phi) - h |sin(phi)|, m: > 0 while the CoG stays inside the drive-wheel track sideways."""
    h = combined(v, payload_kg).cog_height_m
    ph = np.asarray(roll_rad, float)
    return half_track(v) * np.cos(ph) - h * np.abs(np.sin(ph))


def skid_positions(v: Vehicle) -> Array:
    """A skid-steer side's wheel contacts ahead of P, m: wheels_per_side evenly over the wheelbase."""
    assert v.skid is not None
    half = v.skid.wheelbase_m / 2
    return np.linspace(-half, half, wheels_per_side(v))


def end_wheel_loads(
    v: Vehicle, payload_kg: ArrayLike, pitch_rad: ArrayLike, roll_rad: ArrayLike
) -> tuple[Array, Array]:
    """A skid-steer's loads on its first and last wheel pair, N, with the load spread linearly along the
    side (a rigid frame on equal springs, common practice; exact for two axles): N_j = W/n + x_j M/S
    for the pair at x_j, W = m g cos(theta) cos(phi), M = m g (c cos(theta) cos(phi) - h sin(theta)),
    S = sum of x_j^2 over a side's wheels."""
    body = combined(v, payload_kg)
    th, ph = np.asarray(pitch_rad, float), np.asarray(roll_rad, float)
    x = skid_positions(v)
    weight = body.mass_kg * G_N
    normal = weight * np.cos(th) * np.cos(ph)
    moment = weight * (body.cog_ahead_m * np.cos(th) * np.cos(ph) - body.cog_height_m * np.sin(th))
    spread = moment / float(np.sum(x * x))
    return normal / len(x) + x[-1] * spread, normal / len(x) + x[0] * spread


def support_loads(v: Vehicle, payload_kg: ArrayLike, pitch_rad: ArrayLike, roll_rad: ArrayLike) -> tuple[Array, Array]:
    """The two loads that must stay positive for the vehicle to stand: drive wheels and casters, or a
    skid-steer's first and last wheel pair, N."""
    if v.skid is None:
        return wheel_loads(v, payload_kg, pitch_rad, roll_rad)
    return end_wheel_loads(v, payload_kg, pitch_rad, roll_rad)


def turning_coefficient(v: Vehicle, payload_kg: ArrayLike) -> Array:
    """T0 = mu_l m g a / (2 b), N: each side's share of the full turning-resistance moment on level
    ground, with a = the mean |x_j| of a side's wheel contacts (Kozlowski and Pazderski 2004: each wheel
    slides sideways against mu_l N_j; with the load spread linearly along the side, sum N_j |x_j| =
    W a whatever the CoG). 0 on two drive wheels and casters."""
    m = combined(v, payload_kg).mass_kg
    if v.skid is None:
        return np.zeros(np.shape(m))
    arm = float(np.mean(np.abs(skid_positions(v))))
    return v.skid.lateral_friction * m * G_N * arm / (2 * half_track(v))


def turn_shape(v: Vehicle, speed_difference: ArrayLike) -> Array:
    """s(w) = sign(w) min(1, |w|/w_t) of the yaw rate w = (u_R - u_L)/(2b): the turning resistance's sign
    with a ramp through zero yaw rate (w_t: skid.turn_transition), from the rim-speed difference m/s."""
    d = np.asarray(speed_difference, dtype=float)
    if v.skid is None:
        return np.zeros(np.shape(d))
    w = d / (2 * half_track(v))
    return np.clip(w / v.skid.turn_transition_radps, -1.0, 1.0)


def turning(
    v: Vehicle, payload_kg: ArrayLike, pitch_rad: ArrayLike, roll_rad: ArrayLike, *, speed_difference: ArrayLike
) -> tuple[Array, Array]:
    """The turning-resistance rim forces (right, left), N: +-T0 cos(theta) cos(phi) s(w), the moment
    mu_l W a s(w) resisting the yaw rate, shared by the two sides' rims 2b apart."""
    th, ph = np.asarray(pitch_rad, float), np.asarray(roll_rad, float)
    side = turning_coefficient(v, payload_kg) * np.cos(th) * np.cos(ph) * turn_shape(v, speed_difference)
    return side, -side


def tipping(v: Vehicle, payload_kg: ArrayLike, pitch_rad: ArrayLike, roll_rad: ArrayLike) -> Array:
    """0 while both the drive wheels and the casters (a skid-steer: its end wheels) carry load; else 1
    plus the missing load in N (> 1: tipping, growing with how far), as a limit use comparable with the
    others."""
    front, back = support_loads(v, payload_kg, pitch_rad, roll_rad)
    least = np.minimum(front, back)
    return np.maximum(-least, 0.0) + (least <= 0)


def rolling_resistance(
    v: Vehicle, payload_kg: ArrayLike, pitch_rad: ArrayLike, roll_rad: ArrayLike, *, speed: ArrayLike
) -> Array:
    """Per drive wheel: (C_rr,wheel N_drive/2 + C_rr,caster N_caster/2) s(u), N (see rolling_coefficients)."""
    level, transfer = rolling_coefficients(v, payload_kg)
    th, ph = np.asarray(pitch_rad, float), np.asarray(roll_rad, float)
    return (level * np.cos(th) * np.cos(ph) - transfer * np.sin(th)) * deadband_shape(v, speed)


def gravity(v: Vehicle, payload_kg: ArrayLike, pitch_rad: ArrayLike, roll_rad: ArrayLike) -> tuple[Array, Array]:
    """G_R,L = m g sin(theta)/2 +- (c/(2b)) m g cos(theta) sin(phi), N."""
    slope, side = gravity_coefficients(v, payload_kg)
    th, ph = np.asarray(pitch_rad, float), np.asarray(roll_rad, float)
    return slope * np.sin(th) + side * np.cos(th) * np.sin(ph), slope * np.sin(th) - side * np.cos(th) * np.sin(ph)


def wheel_forces(v: Vehicle, op: OperatingPoint) -> tuple[WheelForces, WheelForces]:
    """All force terms at both wheels for the operating point(s)."""
    d, o = mass_matrix_entries(v, op.payload_kg)
    ar, al = np.asarray(op.accel_right, float), np.asarray(op.accel_left, float)
    vr, vl = coriolis(v, op.payload_kg, op.speed_right, op.speed_left)
    gr, gl = gravity(v, op.payload_kg, op.pitch_rad, op.roll_rad)
    diff = np.asarray(op.speed_right, float) - np.asarray(op.speed_left, float)
    tr, tl = turning(v, op.payload_kg, op.pitch_rad, op.roll_rad, speed_difference=diff)
    sides = []
    for inertia, cor, grav, speed, turn in (
        (d * ar + o * al, vr, gr, op.speed_right, tr),
        (o * ar + d * al, vl, gl, op.speed_left, tl),
    ):
        sides.append(
            WheelForces(
                inertia=np.asarray(inertia, float),
                coriolis=np.asarray(cor, float),
                friction=drivetrain_friction(v, speed),
                rolling=rolling_resistance(v, op.payload_kg, op.pitch_rad, op.roll_rad, speed=speed),
                gravity=np.asarray(grav, float),
                turning=turn,
            )
        )
    return sides[0], sides[1]


def motor_gain(v: Vehicle) -> float:
    """Motor current per rim force when motoring, A/N: r / (i eta k_t n_m), the side's force shared by
    its n_m motors (1 on two drive wheels)."""
    drive = v.drive
    return wheel_radius(v) / (drive.gear_ratio * drive.efficiency * drive.torque_constant_nm_per_a * motors_per_side(v))


def wheel_currents(v: Vehicle, op: OperatingPoint) -> Array:
    """Float-model motor current of both wheels, A, shape (..., 2), right then left."""
    right, left = wheel_forces(v, op)
    return np.stack([motor_current(v, right.total, op.speed_right), motor_current(v, left.total, op.speed_left)], -1)


def traction_use(v: Vehicle, side: WheelForces, accel: ArrayLike, drive_load: ArrayLike) -> Array:
    """|contact force| / (grip N_drive / 2): the rim force less what stays inside the wheel (drivetrain
    friction, reflected wheel and rotor inertia), against the traction limit; inf without load."""
    contact = side.total - side.friction - reflected_mass(v) * np.asarray(accel, float)
    limit = v.wheels.grip * np.maximum(np.asarray(drive_load, float), 0.0) / 2
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(limit > 0, np.abs(contact) / limit, np.inf)


def opposed(effort: ArrayLike, speed: ArrayLike) -> NDArray[np.bool_]:
    """True where effort and speed have strictly opposite signs (the wheel drives the motor). Compared
    by sign, not by the product, which underflows to -0.0 for tiny values and would flip the choice."""
    q, u = np.asarray(effort, float), np.asarray(speed, float)
    return ((q > 0) & (u < 0)) | ((q < 0) & (u > 0))


def blend_width(v: Vehicle) -> float:
    """Rim speed over which the efficiency moves from motoring to back-driving, m/s (0: a switch): the
    model's drive.blend_speed, else twice the deadband and at least four firmware speed steps, so the
    change is spread over as many steps as friction's own ramp and more (docs/physics.md, Motor)."""
    if v.drive.blend_speed_mps is not None:
        return v.drive.blend_speed_mps
    return max(2 * v.friction.deadband_mps, BLEND_STEPS_MIN * v.firmware.speed_lsb_mps)


BLEND_STEPS_MIN = 4
"""The default blend band spans at least this many firmware speed steps."""


def backdrive_ratio(v: Vehicle) -> float:
    """k = eta eta_back: the back-driven motor torque over the motoring one for the same rim force."""
    return v.drive.efficiency * v.drive.backdrive_efficiency


def backdrive_factor(v: Vehicle, speed: ArrayLike) -> Array:
    """f(u) = 1 + (k - 1) min(1, |u|/w): the back-driven torque over the motoring torque for the same
    rim force at rim speed u; 1 at standstill, k beyond the blend width w (with w = 0: k for u != 0)."""
    a, w = np.abs(np.asarray(speed, float)), blend_width(v)
    share = np.where(a > 0, 1.0, 0.0) if w == 0 else np.minimum(1.0, a / w)
    return 1 + (backdrive_ratio(v) - 1) * share


def motor_torque(v: Vehicle, force: ArrayLike, speed: ArrayLike) -> Array:
    """Motor torque, N*m: Q r/(i eta) when Q*u >= 0 (motoring, standstill); when the wheel drives the
    motor, that times backdrive_factor (Q r eta_back/i beyond the blend width). A skid-steer side's
    force Q is shared by its motors, each giving 1/n_m of it."""
    q, u = np.asarray(force, float) / motors_per_side(v), np.asarray(speed, float)
    r, i = wheel_radius(v), v.drive.gear_ratio
    motoring = ~opposed(q, u)
    scale = np.where(motoring, 1.0, backdrive_factor(v, u))
    return q * r / (i * v.drive.efficiency) * scale


def motor_current(v: Vehicle, force: ArrayLike, speed: ArrayLike) -> Array:
    """Motor current, A: I = tau_m / k_t."""
    return motor_torque(v, force, speed) / v.drive.torque_constant_nm_per_a


def motor_voltage(v: Vehicle, current: ArrayLike, speed: ArrayLike) -> Array:
    """Terminal voltage, V: U = R_w I + k_t omega_m with omega_m = i u / r (k_e = k_t in SI)."""
    omega_m = v.drive.gear_ratio * np.asarray(speed, float) / wheel_radius(v)
    return v.drive.winding_resistance_ohm * np.asarray(current, float) + v.drive.torque_constant_nm_per_a * omega_m


def force_from_current(v: Vehicle, current: ArrayLike, speed: ArrayLike) -> Array:
    """Rim force from a measured motor current, N: the inverse of motor_current (same direction rule)."""
    i_m, u = np.asarray(current, float), np.asarray(speed, float)
    r, i = wheel_radius(v), v.drive.gear_ratio
    torque = i_m * v.drive.torque_constant_nm_per_a
    motoring = ~opposed(i_m, u)
    scale = np.where(motoring, 1.0, 1.0 / backdrive_factor(v, u))
    return torque * i * v.drive.efficiency / r * scale * motors_per_side(v)


def forward_accel(v: Vehicle, op: OperatingPoint, force_right: ArrayLike, force_left: ArrayLike) -> tuple[Array, Array]:
    """Forward dynamics: rim accelerations q'' = M^-1 (Q - V - F - R - G), m/s^2 (op's accels unused)."""
    zero = dataclasses.replace(op, accel_right=0.0, accel_left=0.0)
    right, left = wheel_forces(v, zero)
    rest_r = np.asarray(force_right, float) - right.total
    rest_l = np.asarray(force_left, float) - left.total
    d, o = inverse_mass_matrix_entries(v, op.payload_kg)
    return d * rest_r + o * rest_l, o * rest_r + d * rest_l


RIGS = ("on-floor", "wheels-up")
"""Where the vehicle is on the bench: on its wheels, or lifted (wheels off the floor)."""


def rig_currents(v: Vehicle, op: OperatingPoint, rig: str) -> Array:
    """The motor currents (..., 2) of the right and left wheel, A, on the rig (see rig_wheel_forces)."""
    right, left = rig_wheel_forces(v, op, rig)
    return np.stack([motor_current(v, right.total, op.speed_right), motor_current(v, left.total, op.speed_left)], -1)


def rig_wheel_forces(v: Vehicle, op: OperatingPoint, rig: str) -> tuple[WheelForces, WheelForces]:
    """wheel_forces on the floor; with the wheels up only the rotating parts (the reflected wheel and
    rotor inertia) and the drivetrain friction act: no vehicle mass, no ground, no gravity."""
    if rig not in RIGS:
        raise ValueError(f"rig: expected one of {', '.join(RIGS)}, found {rig!r}")
    if rig == "on-floor":
        return wheel_forces(v, op)
    m_rot, zero = reflected_mass(v), np.zeros(np.shape(np.asarray(op.speed_right, float)))
    sides = []
    for speed, accel in ((op.speed_right, op.accel_right), (op.speed_left, op.accel_left)):
        inertia = m_rot * np.asarray(accel, float) + zero
        sides.append(
            WheelForces(
                inertia=inertia,
                coriolis=zero,
                friction=drivetrain_friction(v, speed),
                rolling=zero,
                gravity=zero,
                turning=zero,
            )
        )
    return sides[0], sides[1]


def rig_forward_accel(
    v: Vehicle, op: OperatingPoint, force_right: ArrayLike, force_left: ArrayLike, *, rig: str
) -> tuple[Array, Array]:
    """forward_accel for the rig: on the floor M^-1 (Q - V - F - R - G); wheels up (Q - F) / m_rot."""
    if rig == "on-floor":
        return forward_accel(v, op, force_right, force_left)
    m_rot = reflected_mass(v)
    if m_rot <= 0:
        raise ValueError("wheels up needs a wheel or rotor inertia above zero")
    ar = (np.asarray(force_right, float) - drivetrain_friction(v, op.speed_right)) / m_rot
    al = (np.asarray(force_left, float) - drivetrain_friction(v, op.speed_left)) / m_rot
    return ar, al


def point_jacobian(v: Vehicle, ahead_m: float) -> Array:
    """J (2, 2): the velocity of the look-ahead point, `ahead_m` ahead of P on the body's x axis, in body
    axes (forward, lateral to the left), from the rim speeds (right, left): [[1/2, 1/2], [d/(2b), -d/(2b)]]
    (v = (u_R + u_L)/2, and the point moves sideways at d w with w = (u_R - u_L)/(2b)). Dimensionless."""
    if ahead_m == 0:
        raise ValueError("the look-ahead point must lie ahead of or behind P: at P, J is singular")
    k = ahead_m / (2 * half_track(v))
    return np.array([[0.5, 0.5], [k, -k]])


def point_mass_matrix(v: Vehicle, payload_kg: ArrayLike, ahead_m: float) -> Array:
    """Lambda (..., 2, 2) = J^-T M J^-1, kg: the mass matrix seen at the look-ahead point (the
    operational-space form), so that point force = Lambda x point acceleration + the rest."""
    j_inv = np.linalg.inv(point_jacobian(v, ahead_m))
    return np.asarray(j_inv.T @ mass_matrix(v, payload_kg) @ j_inv)


def point_accel(
    v: Vehicle, op: OperatingPoint, force_right: ArrayLike, force_left: ArrayLike, *, ahead_m: float
) -> Array:
    """The rates of change of the look-ahead point's velocity in body axes (v', d w'), m/s^2, from the rim
    forces: J times forward_accel (J is constant in body axes). Not the point's inertial acceleration,
    which adds the turning of the axes (-d w^2 forward, v w sideways): a path follower in body axes
    commands these rates."""
    ar, al = forward_accel(v, op, force_right, force_left)
    return np.stack([ar, al], -1) @ point_jacobian(v, ahead_m).T
