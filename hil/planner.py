"""Bench test plans: jerk-limited wheel-speed segments (ruckig, a time-optimal jerk-limited trajectory
generator) covering both directions, several speeds and accelerations, turns, spin in place and slow
zero crossings through the deadband, checked against the envelope and the current limit with the float
model, and slowed where a segment would exceed it."""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
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


def _segments(v: Vehicle, rng: np.random.Generator | None = None, *, straight: bool = False) -> list[Segment]:
    """One cycle of the plan: every phase the comparison reports, in both directions, interleaved so a
    short plan still turns and spins (turns and spins excite the yaw inertia); `straight`: the straight
    segments only (on a slope, where a turn would change the pitch and roll the vehicle stands at)."""
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
    if straight:
        out = [s for s in out if s.right == s.left]
    if rng is None:
        return out
    jitter = lambda x: float(np.clip(x * rng.uniform(0.6, 1.4), -1.0, 1.0))  # noqa: E731
    jittered = []
    for s in out:
        right = jitter(s.right)
        left = right if straight else jitter(s.left)
        jittered.append(Segment(right=right, left=left, accel=jitter(s.accel), hold_s=s.hold_s * rng.uniform(0.5, 1.5)))
    return jittered


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


def _fields(profile: np.ndarray, **situation: float) -> dict[str, np.ndarray]:
    """A profile (rows of the wheel pairs in the interface's order: speed right, left, accel right, left)
    in a fixed situation (the slow members' SI values), as SI values per interface member, one row each."""
    pairs = [m for m in interface.FF_IN.members if m.count == 2]
    out = {m.name: profile[:, 2 * k : 2 * k + 2] for k, m in enumerate(pairs)}
    return out | {name: np.full(len(profile), value) for name, value in situation.items()}


def peak_current_use(v: Vehicle, profile: np.ndarray, *, rig: str, payload: float, pitch: float, roll: float) -> float:
    """Largest |current| / current_limit along a profile with the float model of the rig."""
    si = interface.si_of_fields(interface.FF_IN, _fields(profile, payload=payload, pitch=pitch, roll=roll))
    return plan_current_use(v, si, rig=rig)


def plan_current_use(v: Vehicle, si: dict[str, np.ndarray], *, rig: str) -> float:
    """Largest |current| / current_limit over rows of setpoints (keyed by OperatingPoint attribute)."""
    cur = np.abs(dynamics.rig_currents(v, dynamics.OperatingPoint(**si), rig))
    return float(np.max(cur)) / v.drive.current_limit_a


@dataclass(frozen=True)
class Excess:
    """Rows of a plan beyond one limit: the first, the worst (largest value over its limit) and how many;
    `phrase(k)` names row k's value and the limit ("speed_left 1.1 m/s beyond envelope.speed_max ...")."""

    first: int
    worst: int
    count: int
    phrase: Callable[[int], str]


def _excess(over: np.ndarray, ratio: np.ndarray, phrase: Callable[[int], str]) -> Excess | None:
    """The Excess of the rows flagged in `over`, the worst by `ratio` (value over its limit)."""
    rows = np.flatnonzero(over)
    if not rows.size:
        return None
    worst = int(rows[np.argmax(np.asarray(ratio, float)[rows])])
    return Excess(first=int(rows[0]), worst=worst, count=int(rows.size), phrase=phrase)


def plan_excesses(v: Vehicle, plan: Plan, rig: str) -> list[Excess]:
    """Every limit the plan goes beyond: the model's envelope, body-frame limits, and the drive (current
    limit, supply voltage, by the float model of the rig); a body-frame plan's own columns first."""
    c = plan.columns
    bad = [found for m in interface.FF_IN.members for col in m.columns if (found := _outside(v, m, col, c[col]))]
    bad += [found for m in (interface.SPEED, interface.ACCEL) for found in _outside_region(v, m, plan)]
    if interface.ff_in(v).body:  # the plan file has body-frame columns: name those first, then the wheels they make
        wheels = [dataclasses.replace(e, phrase=_in_body_words(e.phrase)) for e in bad]
        bad = _body_outside(v, plan) + wheels
    return bad + _drive_problem(v, plan, rig)


def plan_problem(v: Vehicle, plan: Plan, rig: str) -> str | None:
    """The first row of a plan outside the model's envelope or beyond the drive, as one phrase; None when
    every row is inside."""
    bad = plan_excesses(v, plan, rig)
    if not bad:
        return None
    if interface.ff_in(v).body:
        e = min(bad, key=lambda e: e.first)  # the first listed of the earliest: the plan's own columns
    else:
        e = min(bad, key=lambda e: (e.first, e.phrase(e.first)))
    return f"row {e.first + 2} (t = {plan.columns['t'][e.first]:.6g} s): {e.phrase(e.first)}"


def excess_summary(plan: Plan, bad: list[Excess]) -> str:
    """Each limit's worst row and how many rows go beyond it, for a warning."""
    n = len(plan.columns["t"])
    return "; ".join(f"worst row {e.worst + 2}: {e.phrase(e.worst)} ({e.count} of {n} rows beyond)" for e in bad)


def _outside(v: Vehicle, m: interface.Member, col: str, values: np.ndarray) -> Excess | None:
    """The rows of one plan column outside the member's envelope edge, and the phrase naming them."""
    limit = float(model.value(v, m.edge_key))
    slack = 1 + 1e-6  # float dust of a plan written with 9 significant digits
    values = np.asarray(values, float)
    if m.signed:
        over = np.abs(values) > limit * slack + 1e-12
        text = f"beyond {m.edge_key} ({limit:.6g} {m.unit})"
    else:
        over = (values < 0) | (values > limit * slack)
        text = f"outside 0 .. {m.edge_key} ({limit:g} {m.unit})"
    below = (values < 0) & (not m.signed)  # an unsigned input below zero: beyond by 1 + |value| / limit
    ratio = np.where(below, limit + np.abs(values), np.abs(values)) / max(limit, 1e-300)
    return _excess(over, ratio, lambda k: f"{col} {values[k]:.6g} {m.unit} {text}")


def _body_outside(v: Vehicle, plan: Plan) -> list[Excess]:
    """Body-frame plan columns beyond their limits (the key, or what the wheel limits allow)."""
    st = interface.ff_in(v)
    columns = interface.columns_si(v, st, plan.si())
    found = []
    for m in (m for m in st.members if m.body):
        limit = bodyframe.limit_si(v, m.name)
        values = np.asarray(columns[m.name], float)
        section, key = m.edge_key.split(".")
        named = (
            m.edge_key
            if getattr(getattr(v, section), model.SCHEMA[section][key].field) is not None
            else ("what the wheel limits allow")
        )
        phrase = _phrase(f"{m.name} ", values, m.unit, f"beyond {named} ({limit:.6g} {m.unit})")
        excess = _excess(np.abs(values) > limit * (1 + 1e-6) + 1e-12, np.abs(values) / limit, phrase)
        if excess:
            found.append(excess)
    return found


def _phrase(what: str, values: np.ndarray, unit: str, tail: str) -> Callable[[int], str]:
    """Row k's value in words: `what`, the value (4 significant digits where no unit is given, the
    unit then being at the start of `tail`), `tail`."""
    if not unit:
        return lambda k: f"{what}{values[k]:.4g} {tail}"
    return lambda k: f"{what}{values[k]:.6g} {unit} {tail}"


def _in_body_words(phrase: Callable[[int], str]) -> Callable[[int], str]:
    """A wheel-column phrase for a plan whose file has body-frame columns: the wheel value they make."""

    def words(k: int) -> str:
        text = phrase(k)
        for pair, said in (("speed", "speed"), ("accel", "acceleration")):
            for side in interface.SIDES:
                column = f"{pair}_{side}"
                if text.startswith(column + " "):
                    return f"the {side} wheel's {said}{text[len(column) :]} (from the plan's forward and yaw columns)"
            if text.startswith(f"{pair}_right/left "):
                rest = text[len(pair) + 11 :]
                return f"the wheels' {said} (right/left){rest} (from the plan's forward and yaw columns)"
        return text

    return words


def _outside_region(v: Vehicle, m: interface.Member, plan: Plan) -> list[Excess]:
    """The rows whose wheel pair breaks a body-frame limit that is set (forward, or yaw: the difference
    over the track), each with the phrase naming the key."""
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

        def phrase(k: int, *, key: str = key, limit: float = limit, value: np.ndarray = value, unit: str = unit) -> str:
            pair = f"{m.name}_right/left {right[k]:.6g}/{left[k]:.6g} {m.unit}"
            return f"{pair}: {value[k]:.6g} {unit} beyond {key} ({limit:.6g} {unit})"

        excess = _excess(np.abs(value) > limit * (1 + 1e-6) + 1e-12, np.abs(value) / limit, phrase)
        if excess:
            found.append(excess)
    return found


def _drive_problem(v: Vehicle, plan: Plan, rig: str) -> list[Excess]:
    """The rows whose float-model current exceeds drive.current_limit or whose voltage exceeds
    drive.supply_voltage, per wheel."""
    op = dynamics.OperatingPoint(**plan.si())
    currents = dynamics.rig_currents(v, op, rig)
    found: list[Excess] = []
    i_max, u_max = v.drive.current_limit_a, v.drive.supply_voltage_v
    for k_side, speed in enumerate((np.asarray(op.speed_right, float), np.asarray(op.speed_left, float))):
        current = np.broadcast_to(currents[..., k_side], np.shape(speed))
        volts = np.abs(dynamics.motor_voltage(v, current, speed))
        side = interface.SIDES[k_side]
        for what, values, limit, tail in (
            ("current", np.abs(current), i_max, f"A beyond drive.current_limit ({i_max:g} A)"),
            ("voltage", volts, u_max, f"V beyond drive.supply_voltage ({u_max:g} V)"),
        ):
            phrase = _phrase(f"{side} motor {what} ", values, "", tail)
            excess = _excess(values > limit * (1 + 1e-6), values / limit, phrase)
            if excess:
                found.append(excess)
    return found


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
    """A plan inside the envelope and, by the float model, within 90 % of the current limit. On a slope
    (pitch or roll) it only drives straight: its pitch and roll hold only while the heading does."""
    _check_where(v, payload=payload, pitch=pitch, roll=roll)
    if duration_s < 5:
        raise UserError("bench plan: --duration: expected at least 5 s (room to start and stop)")
    rng = None if seed is None else np.random.default_rng(seed)
    segments, scale = _segments(v, rng, straight=bool(pitch or roll)), 1.0
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
