"""Bench test plans: jerk-limited wheel-speed segments (ruckig, a time-optimal jerk-limited trajectory
generator) covering both directions, several speeds and accelerations, turns, spin in place and slow
zero crossings through the deadband, checked against the envelope and the current limit with the float
model, and slowed where a segment would exceed it."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from kinetab.generator import bodyframe, dynamics, interface, model, region
from kinetab.generator.errors import UserError
from kinetab.generator.vehicle import Vehicle
from ruckig import ControlInterface, InputParameter, OutputParameter, Result, Ruckig, Synchronization

from .planfile import PLAN_COLUMNS, Plan, phase_of

JERK_TIME_S = 0.1  # time to reach the acceleration limit: jerk = accel / 0.1 s (a gentle bench ramp)


@dataclass(frozen=True)
class Segment:
    """Go to these rim speeds (fractions of speed_max) with this fraction of accel_max, then hold."""

    right: float
    left: float
    accel: float
    hold_s: float


def _segments(v: Vehicle, rng: np.random.Generator | None = None) -> list[Segment]:
    """One cycle of the plan: every phase the comparison reports, in both directions, interleaved so a
    short plan still turns and spins (turns and spins excite the yaw inertia)."""
    crawl = min(0.5, 2.5 * v.friction.deadband_mps / v.envelope.speed_max_mps)  # just past the deadband
    out = [
        Segment(right=0, left=0, accel=0.2, hold_s=0.5),
        Segment(right=crawl, left=crawl, accel=0.05, hold_s=0.5),
        Segment(right=-crawl, left=-crawl, accel=0.05, hold_s=0.5),
        Segment(right=0, left=0, accel=0.05, hold_s=0.3),
    ]
    for d in (1, -1):  # forward, then backward
        out += [
            Segment(right=0.25 * d, left=0.25 * d, accel=0.3, hold_s=0.5),
            Segment(right=0.5 * d, left=0.25 * d, accel=0.6, hold_s=0.6),
            Segment(right=0.75 * d, left=0.75 * d, accel=1.0, hold_s=0.5),
            Segment(right=1.0 * d, left=1.0 * d, accel=1.0, hold_s=0.5),
            Segment(right=0.3 * d, left=0.5 * d, accel=0.6, hold_s=0.6),
            Segment(right=0, left=0, accel=1.0, hold_s=0.3),
            Segment(right=0.3 * d, left=-0.3 * d, accel=0.4, hold_s=0.6),
            Segment(right=0, left=0, accel=0.4, hold_s=0.3),
        ]
    if rng is None:
        return out
    jitter = lambda x: float(np.clip(x * rng.uniform(0.6, 1.4), -1.0, 1.0))  # noqa: E731
    return [
        Segment(
            right=jitter(s.right), left=jitter(s.left), accel=jitter(s.accel), hold_s=s.hold_s * rng.uniform(0.5, 1.5)
        )
        for s in out
    ]


def _target(v: Vehicle, seg: Segment) -> list[float]:
    """The segment's rim speeds (fractions of speed_max) moved into the speed region (region.clamp)."""
    speed_max = v.envelope.speed_max_mps
    right, left = region.clamp(seg.right * speed_max, seg.left * speed_max, region.speed_region(v), integer=False)
    return [float(right), float(left)]


def _accel_limits(v: Vehicle, start: list[float], target: list[float], accel: float) -> list[float]:
    """Per-wheel acceleration limits for a move from `start` to `target` speeds: `accel` (a fraction of
    what the region allows along the move's direction) shared in proportion to each wheel's change, so the
    phase-synchronised move runs along a straight line and its accelerations stay inside the region."""
    change = np.array(target) - np.array(start)
    top = float(np.max(np.abs(change)))
    if top == 0:
        return [accel * region.accel_region(v).edge] * 2
    u = change / top  # |u|_inf = 1
    reg = region.accel_region(v)
    along = min(reg.edge, *(lim / abs(x) for lim, x in ((reg.sum_max, u.sum()), (reg.diff_max, u[0] - u[1])) if x))
    return [max(accel * along * abs(x), 1e-9) for x in u]


def _profile(v: Vehicle, segments: list[Segment], *, period_s: float, duration_s: float, scale: float) -> np.ndarray:
    """Rim speeds and accelerations (n, 4) along the segments, repeated until duration_s, stopped at the end.
    Each move is phase-synchronised (a straight line in the plane of the two wheel speeds), so the
    speeds and accelerations stay inside their regions (convex) from one held pair to the next."""
    otg, inp, out = Ruckig(2, period_s), InputParameter(2), OutputParameter(2)
    inp.control_interface, inp.synchronization = ControlInterface.Velocity, Synchronization.Phase
    inp.current_position, inp.current_velocity, inp.current_acceleration = [0.0, 0.0], [0.0, 0.0], [0.0, 0.0]
    inp.max_velocity = [region.speed_region(v).edge] * 2
    rows: list[list[float]] = []
    n_total = int(round(duration_s / period_s))
    k = 0
    while len(rows) < n_total:
        seg = segments[k % len(segments)]
        stopping = len(rows) >= n_total - int(3 / period_s)  # leave room to stop
        target = [0.0, 0.0] if stopping else _target(v, seg)
        limits = _accel_limits(v, list(inp.current_velocity), target, max(seg.accel, 0.2) * scale)
        inp.target_velocity, inp.target_acceleration = target, [0.0, 0.0]
        inp.max_acceleration, inp.max_jerk = limits, [a / JERK_TIME_S for a in limits]
        result = Result.Working
        while result == Result.Working and len(rows) < n_total:
            result = otg.update(inp, out)
            rows.append([*out.new_velocity, *out.new_acceleration])
            out.pass_to_input(inp)
        for _ in range(int(seg.hold_s / period_s)):
            if len(rows) >= n_total:
                break
            rows.append([*inp.current_velocity, 0.0, 0.0])
        k += 1
        if stopping:
            rows.extend([[0.0, 0.0, 0.0, 0.0]] * max(0, n_total - len(rows)))
    return _inside_regions(v, np.array(rows[:n_total]))


def _inside_regions(v: Vehicle, prof: np.ndarray) -> np.ndarray:
    """The profile with float dust past a region's edge clamped away; more than dust is a planner bug."""
    for cols, reg in ((slice(0, 2), region.speed_region(v)), (slice(2, 4), region.accel_region(v))):
        pair = prof[:, cols]
        assert region.inside(pair[:, 0], pair[:, 1], reg, slack=1e-6).all(), "a planned move left its region"
        right, left = region.clamp(pair[:, 0], pair[:, 1], reg, integer=False)
        prof[:, cols] = np.stack([right, left], -1)
    return prof


def _fields(profile: np.ndarray, *, payload: float, pitch: float, roll: float) -> dict[str, np.ndarray]:
    """A profile (rows of speed right, left, accel right, left) on a fixed slope and payload, as SI
    values per interface member, one row each."""
    n = len(profile)
    return {
        "speed": profile[:, :2],
        "accel": profile[:, 2:],
        "pitch": np.full(n, pitch),
        "roll": np.full(n, roll),
        "payload": np.full(n, payload),
    }


def peak_current_use(v: Vehicle, profile: np.ndarray, *, rig: str, payload: float, pitch: float, roll: float) -> float:
    """Largest |current| / current_limit along a profile with the float model of the rig."""
    si = interface.si_of_fields(interface.FF_IN, _fields(profile, payload=payload, pitch=pitch, roll=roll))
    return plan_current_use(v, si, rig=rig)


def plan_current_use(v: Vehicle, si: dict[str, np.ndarray], *, rig: str) -> float:
    """Largest |current| / current_limit over rows of setpoints (keyed by OperatingPoint attribute)."""
    cur = np.abs(dynamics.rig_currents(v, dynamics.OperatingPoint(**si), rig))
    return float(np.max(cur)) / v.drive.current_limit_a


def plan_problem(v: Vehicle, plan: Plan, rig: str) -> str | None:
    """The first row of a plan outside the model's envelope or beyond the drive (current limit, supply
    voltage, by the float model of the rig), as one phrase; None when every row is inside."""
    c = plan.columns
    bad = [found for m in interface.FF_IN.members for col in m.columns if (found := _outside(v, m, col, c[col]))]
    bad += [found for m in (interface.SPEED, interface.ACCEL) if (found := _outside_region(v, m, plan))]
    body = interface.ff_in(v).body
    if body:  # the plan file has body-frame columns: name those first, then the wheels they make
        bad = _body_outside(v, plan) + [(k, _in_body_words(text)) for k, text in bad]
    drive = _drive_problem(v, plan, rig)
    if drive:
        bad.append(drive)
    if not bad:
        return None
    k, text = min(bad, key=lambda found: found[0]) if body else min(bad)
    return f"row {k + 2} (t = {c['t'][k]:.6g} s): {text}"


def _outside(v: Vehicle, m: interface.Member, col: str, values: np.ndarray) -> tuple[int, str] | None:
    """The first row of one plan column outside the member's envelope edge, and the phrase naming it."""
    limit = float(model.value(v, m.edge_key))
    slack = 1 + 1e-6  # float dust of a plan written with 9 significant digits
    if m.signed:
        over = np.flatnonzero(np.abs(values) > limit * slack + 1e-12)
        text = f"beyond {m.edge_key} ({limit:.6g} {m.unit})"
    else:
        over = np.flatnonzero((values < 0) | (values > limit * slack))
        text = f"outside 0 .. {m.edge_key} ({limit:g} {m.unit})"
    if not over.size:
        return None
    k = int(over[0])
    return k, f"{col} {values[k]:.6g} {m.unit} {text}"


def _body_outside(v: Vehicle, plan: Plan) -> list[tuple[int, str]]:
    """Body-frame plan columns beyond their limits (the key, or what the wheel limits allow)."""
    st = interface.ff_in(v)
    columns = interface.columns_si(v, st, plan.si())
    found = []
    for m in (m for m in st.members if m.body):
        limit = bodyframe.limit_si(v, m.name)
        over = np.flatnonzero(np.abs(columns[m.name]) > limit * (1 + 1e-6) + 1e-12)
        if over.size:
            section, key = m.edge_key.split(".")
            named = (
                m.edge_key
                if getattr(getattr(v, section), model.SCHEMA[section][key].field) is not None
                else ("what the wheel limits allow")
            )
            k = int(over[0])
            found.append((k, f"{m.name} {columns[m.name][k]:.6g} {m.unit} beyond {named} ({limit:.6g} {m.unit})"))
    return found


def _in_body_words(text: str) -> str:
    """A wheel-column phrase for a plan whose file has body-frame columns: the wheel value they make."""
    for pair, words in (("speed", "speed"), ("accel", "acceleration")):
        for side in interface.SIDES:
            column = f"{pair}_{side}"
            if text.startswith(column + " "):
                return f"the {side} wheel's {words}{text[len(column) :]} (from the plan's forward and yaw columns)"
        if text.startswith(f"{pair}_right/left "):
            return f"the wheels' {words} (right/left){text[len(pair) + 11 :]} (from the plan's forward and yaw columns)"
    return text


def _outside_region(v: Vehicle, m: interface.Member, plan: Plan) -> tuple[int, str] | None:
    """The first row whose wheel pair breaks a body-frame limit that is set (forward, or yaw: the
    difference over the track), and the phrase naming the key."""
    right, left = (np.asarray(plan.columns[col], float) for col in m.columns)
    env, track = v.envelope, v.wheels.track_m
    if m is interface.SPEED:
        limits = [
            ("envelope.forward_speed_max", env.forward_speed_max_mps, (right + left) / 2, "m/s"),
            ("envelope.yaw_rate_max", env.yaw_rate_max_radps, (right - left) / track, "rad/s"),
        ]
    else:
        limits = [
            ("envelope.forward_accel_max", env.forward_accel_max_mps2, (right + left) / 2, "m/s^2"),
            ("envelope.yaw_accel_max", env.yaw_accel_max_radps2, (right - left) / track, "rad/s^2"),
        ]
    found = []
    for key, limit, value, unit in limits:
        if limit is None:
            continue
        over = np.flatnonzero(np.abs(value) > limit * (1 + 1e-6) + 1e-12)
        if over.size:
            k = int(over[0])
            pair = f"{m.name}_right/left {right[k]:.6g}/{left[k]:.6g} {m.unit}"
            found.append((k, f"{pair}: {value[k]:.6g} {unit} beyond {key} ({limit:.6g} {unit})"))
    return min(found) if found else None


def _drive_problem(v: Vehicle, plan: Plan, rig: str) -> tuple[int, str] | None:
    """The first row whose float-model current exceeds drive.current_limit or whose voltage exceeds
    drive.supply_voltage."""
    op = dynamics.OperatingPoint(**plan.si())
    currents = dynamics.rig_currents(v, op, rig)
    worst: list[tuple[int, str]] = []
    for k_side, speed in enumerate((np.asarray(op.speed_right, float), np.asarray(op.speed_left, float))):
        current = np.broadcast_to(currents[..., k_side], np.shape(speed))
        volts = np.abs(dynamics.motor_voltage(v, current, speed))
        over = np.flatnonzero(np.abs(current) > v.drive.current_limit_a * (1 + 1e-6))
        if over.size:
            k = int(over[0])
            worst.append(
                (k, f"current {abs(current[k]):.4g} A beyond drive.current_limit ({v.drive.current_limit_a:g} A)")
            )
        high = np.flatnonzero(volts > v.drive.supply_voltage_v * (1 + 1e-6))
        if high.size:
            k = int(high[0])
            worst.append((k, f"voltage {volts[k]:.4g} V beyond drive.supply_voltage ({v.drive.supply_voltage_v:g} V)"))
    return min(worst) if worst else None


def make_plan(
    v: Vehicle,
    *,
    duration_s: float,
    period_s: float,
    rig: str,
    payload: float = 0.0,
    pitch: float = 0.0,
    roll: float = 0.0,
    seed: int | None = None,
) -> Plan:
    """A plan inside the envelope and, by the float model, within 90 % of the current limit."""
    _check_where(v, payload=payload, pitch=pitch, roll=roll)
    if duration_s < 5:
        raise UserError("bench plan: --duration: expected at least 5 s (room to start and stop)")
    segments, scale = _segments(v, None if seed is None else np.random.default_rng(seed)), 1.0
    while True:
        profile = _profile(v, segments, period_s=period_s, duration_s=duration_s, scale=scale)
        use = peak_current_use(v, profile, rig=rig, payload=payload, pitch=pitch, roll=roll)
        if use <= 0.9:
            break
        if scale < 0.05:
            raise UserError(
                f"bench plan: even at 5 % of accel_max the current reaches {use:.0%} of drive.current_limit"
            )
        scale *= 0.8  # slow down: a smaller acceleration and jerk everywhere
    rows = interface.fields_to_rows(interface.FF_IN, _fields(profile, payload=payload, pitch=pitch, roll=roll))
    cols = {"t": np.arange(len(profile)) * period_s, **dict(zip(interface.FF_IN.columns, rows.T))}
    assert tuple(cols) == PLAN_COLUMNS
    return Plan(cols, phase_of(profile[:, :2], profile[:, 2:], v.friction.deadband_mps))


def _check_where(v: Vehicle, *, payload: float, pitch: float, roll: float) -> None:
    """One UserError line naming the option and its range when the plan's payload or slope is outside."""
    env = v.envelope
    if not 0 <= payload <= v.payload.mass_max_kg:
        raise UserError(
            f"bench plan: --payload: expected 0 .. payload.mass_max ({v.payload.mass_max_kg:g} kg), "
            f"found {payload:g} kg"
        )
    for name, value, limit, key in (
        ("--pitch", pitch, env.pitch_max_rad, "envelope.pitch_max"),
        ("--roll", roll, env.roll_max_rad, "envelope.roll_max"),
    ):
        if abs(value) > limit * (1 + 1e-9):
            raise UserError(
                f"bench plan: {name}: expected within +-{key} ({np.degrees(limit):.4g} deg), "
                f"found {np.degrees(value):.4g} deg"
            )
