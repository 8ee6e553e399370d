"""The set of bench logs that makes every fit coordinate identifiable, judged before any run from the
planned motion: the regressor of each candidate log (rig, payload, pitch) with the noise a drive's
current measurement is expected to have, classified like the fit classifies real logs.

Also answers, for a fit that had to hold a group, which further log would separate it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from kinetab.generator import dynamics
from kinetab.generator.errors import UserError
from kinetab.generator.vehicle import Vehicle

from . import fitparams as fp
from . import identifiability, planner, regressor
from .planfile import Plan

MARGIN = 3.0  # a designed campaign must determine each direction this many times better than the fit needs
# (real residuals are correlated in time: their long-run variance was 1.3 x white noise on simulated logs)
ASSESS_PERIOD_S = 0.01  # planned motion is sampled this coarsely for the assessment (information scales up)

NOISE_OF_LIMIT = 0.01
"""The current noise a campaign plans for unless told (--noise): 1 % of drive.current_limit."""


@dataclass(frozen=True)
class Candidate:
    """One kind of log: where the vehicle stands and what it carries."""

    rig: str
    payload_kg: float
    pitch_rad: float

    def label(self) -> str:
        where = "wheels up" if self.rig == "wheels-up" else "on the floor"
        slope = f", on a {np.degrees(self.pitch_rad):.3g} deg ramp" if self.pitch_rad else ", level"
        load = f", payload {self.payload_kg:.4g} kg" if self.rig == "on-floor" else ""
        return f"{where}{load}{slope if self.rig == 'on-floor' else ''}"

    def slug(self) -> str:
        if self.rig == "wheels-up":
            return "wheels-up"
        ramp = f"-ramp{np.degrees(self.pitch_rad):.3g}deg" if self.pitch_rad else ""
        return f"floor-{self.payload_kg:.4g}kg{ramp}"


def candidates(v: Vehicle) -> list[Candidate]:
    """The logs a campaign may use, in the order it adds them: wheels up (drivetrain alone), on the floor
    empty and fully loaded (the payload is a known mass: it fixes the efficiencies' scale), and on a ramp
    of pitch_max empty and loaded (the slope moves load between drive wheels and casters, and changes a
    skid-steer's normal load)."""
    full, ramp = v.payload.mass_max_kg, v.envelope.pitch_max_rad
    out = [Candidate("wheels-up", 0.0, 0.0), Candidate("on-floor", 0.0, 0.0)]
    if full > 0:
        out.append(Candidate("on-floor", full, 0.0))
    if ramp > 0:
        out += [Candidate("on-floor", 0.0, ramp)] + ([Candidate("on-floor", full, ramp)] if full > 0 else [])
    return out


def matches(c: Candidate, rig: str, payload_kg: float, pitch_rad: float) -> bool:
    """Whether a log (its rig, median payload and pitch) is of this kind."""
    return (
        c.rig == rig
        and abs(c.payload_kg - payload_kg) <= 0.05 * max(c.payload_kg, 1.0)
        and (rig == "wheels-up" or abs(c.pitch_rad - pitch_rad) <= 0.2 * max(c.pitch_rad, np.radians(0.5)))
    )


def plan_for(v: Vehicle, c: Candidate, *, duration_s: float, period_s: float) -> Plan:
    return planner.make_plan(
        v, duration_s=duration_s, period_s=period_s, rig=c.rig, payload=c.payload_kg, pitch=c.pitch_rad
    )


def planned_rows(
    v: Vehicle, plan: Plan, rig: str, *, noise_a: float = 0.0, log_period_s: float | None = None
) -> regressor.Rows:
    """The fit's rows for a planned motion as `v` would produce it (the motion itself, the model's force),
    weighted 0 where the fit would leave them out: near a friction (or turning-resistance) kink, or where
    the current is within three times the noise of zero (its direction of power flow would be unsure).
    The fit's filter is the one for logs every log_period_s (regressor.cutoff_for; default: the plan's
    own period, which a coarse assessment plan does not share with the logs)."""
    si = plan.si()
    op = dynamics.OperatingPoint(**si)
    right, left = dynamics.rig_wheel_forces(v, op, rig)
    n = len(plan)
    parts, weight = [], []
    dt = float(plan.columns["t"][1] - plan.columns["t"][0])
    half = max(1, int(round(0.75 / (regressor.cutoff_for(log_period_s or dt) * dt))))
    turning = regressor.turn_kinked(v, np.asarray(si["speed_right"] - si["speed_left"], float), half)
    for speed, side in ((si["speed_right"], right), (si["speed_left"], left)):
        force = np.broadcast_to(side.total, (n,))
        current = force * dynamics.motor_gain(v)
        parts.append(regressor.measured_columns(v, current, speed, current))
        unsure = np.convolve((np.abs(current) < 3 * noise_a).astype(float), np.ones(2 * half + 1), mode="same") > 0
        weight.append((~(unsure | turning | regressor.kinked(v, np.asarray(speed, float), half))).astype(float))
    return regressor.Rows(
        ops=[(op, rig)],
        measured=np.concatenate(parts),
        speed=np.concatenate([si["speed_right"], si["speed_left"]]),
        log=np.zeros(2 * n, dtype=int),
        sample=np.concatenate([np.arange(n), np.arange(n)]),
        how=[],
        weight=np.concatenate(weight),
    )


def information(
    v: Vehicle,
    c: Candidate,
    *,
    duration_s: float,
    period_s: float,
    noise_a: float,
    log_period_s: float | None = None,
) -> np.ndarray | None:
    """X^T X of the scaled regressor a log of this kind adds (at the model's coordinates), as if sampled
    every period_s; the fit filters as for logs every log_period_s (default period_s). None when the
    vehicle cannot run such a plan (the drive's current is not enough, say, loaded on the ramp)."""
    try:
        plan = plan_for(v, c, duration_s=duration_s, period_s=ASSESS_PERIOD_S)
    except UserError:
        return None
    fm = regressor.force_model(v, planned_rows(v, plan, c.rig, noise_a=noise_a, log_period_s=log_period_s or period_s))
    js = fm.jacobian(fm.x0) * fp.scales(v, fm.x0)
    return np.asarray(js.T @ js * (ASSESS_PERIOD_S / period_s))


def verdict(grams: list[np.ndarray], noise_n: float, margin: float = 1.0) -> identifiability.Verdict:
    """The classification of a set of logs by their information, for white residuals of `noise_n` N
    per row (so the long-run covariance of the scores is noise^2 X^T X), `margin` times stricter."""
    total = np.sum(grams, axis=0)
    return identifiability.classify(total, total * (noise_n * margin) ** 2)


@dataclass(frozen=True)
class Campaign:
    """A campaign: its logs in the order to run them, and what it would still leave held."""

    logs: list[Candidate]
    held: list[tuple[str, ...]]


def choose_runs(v: Vehicle, *, noise_a: float, duration_s: float, period_s: float) -> Campaign:
    """Add candidate logs in order until every coordinate is determined with MARGIN to spare (or the
    candidates run out); keep only those that helped."""
    noise_n = noise_a / dynamics.motor_gain(v)
    chosen: list[Candidate] = []
    grams: list[np.ndarray] = []
    held: list[tuple[str, ...]] = []
    for c in candidates(v):
        g = information(v, c, duration_s=duration_s, period_s=period_s, noise_a=noise_a)
        if g is None:
            continue
        before = verdict(grams, noise_n, MARGIN) if grams else None
        after = verdict([*grams, g], noise_n, MARGIN)
        if before is None or len(after.free) > len(before.free):
            chosen.append(c)
            grams.append(g)
            held = [tuple(fp.names(v)[j] for j in grp.members) for grp in after.groups]
        if not held and len(chosen) >= 2:
            break
    return Campaign(logs=chosen, held=held)


def informations(
    v: Vehicle, present: list[Candidate], *, noise_a: float, duration_s: float = 60.0
) -> dict[Candidate, np.ndarray]:
    """The information of each candidate log not among `present` (those the vehicle can run), for a
    run of duration_s at 1 ms."""
    out = {}
    for c in candidates(v):
        if c not in present:
            g = information(
                v, c, duration_s=20.0, period_s=0.001 * 20.0 / duration_s, noise_a=noise_a, log_period_s=0.001
            )
            if g is not None:
                out[c] = g
    return out


def separating(
    gram: np.ndarray, omega: np.ndarray, *, members: tuple[int, ...], info: dict[Candidate, np.ndarray]
) -> list[Candidate]:
    """The fewest candidate logs (of `info`; one, else two) that, added to the data (gram and omega in
    scaled coordinates), would make every coordinate of `members` free; [] when none do."""
    import itertools

    noise2 = float(np.trace(omega) / max(np.trace(gram), 1e-300))  # long-run variance per unit of information
    for size in (1, 2):
        for combo in itertools.combinations(info, size):
            extra = np.sum([info[c] for c in combo], axis=0)
            result = identifiability.classify(gram + extra, omega + extra * noise2)
            if all(j in result.free for j in members):
                return list(combo)
    return []
