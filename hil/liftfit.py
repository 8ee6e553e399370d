"""`bench fit` of lift logs: a bounded least-squares fit of the lift's carriage mass, assist force,
Coulomb and viscous friction and both efficiencies to the measured lift current at the measured motion,
with HAC standard errors (hil/covariance.py), holding what the logs cannot determine.

What the logs determine: the current is, per direction of power flow, linear in the acceleration, the
speed, the load and a constant. The rotor's inertia and the carriage mass both multiply the acceleration,
and the counterweight and the assist force both add a constant; so the rotor inertia and the counterweight
are held at the model's values (a datasheet and a scale give them), and the fitted carriage mass and
assist force carry any error in them. The efficiency is told apart from the carriage mass only by loads
that differ between logs, the back-driving efficiency only by rows where the load drives the motor, the
viscous friction only by more than one speed, and the Coulomb friction only by both directions."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np
from kinetab.generator import lift
from kinetab.generator.dynamics import G_N, opposed
from kinetab.generator.vehicle import Lift, Vehicle

from . import covariance, liftlog

FREE = ("carriage_mass", "assist_force", "coulomb", "viscous", "efficiency", "backdrive_efficiency")
FIELD = {
    "carriage_mass": "carriage_mass_kg",
    "assist_force": "assist_force_n",
    "coulomb": "coulomb_n",
    "viscous": "viscous_ns_per_m",
    "efficiency": "efficiency",
    "backdrive_efficiency": "backdrive_efficiency",
}
UNIT = {"carriage_mass": "kg", "assist_force": "N", "coulomb": "N", "viscous": "N*s/m"}
BOUNDS = {
    "carriage_mass": (0.0, math.inf),
    "assist_force": (-math.inf, math.inf),
    "coulomb": (0.0, math.inf),
    "viscous": (0.0, math.inf),
    "efficiency": (0.05, 1.0),
    "backdrive_efficiency": (0.05, 1.0),
}
LOAD_SPREAD = 0.25  # loads must differ by this much of lift.payload_max to separate the efficiency
MIN_ROWS = 200  # rows of a kind (back-driven, each direction) needed to determine what they show
WEAK = 0.25  # a free value whose standard error exceeds this much of its scale is held after all


@dataclass(frozen=True)
class Rows:
    """The rows the fit uses, from every log: load, smoothed speed, derivative acceleration, current."""

    payload: np.ndarray
    speed: np.ndarray
    accel: np.ndarray
    current: np.ndarray
    group: np.ndarray  # which log
    index: np.ndarray  # row number within its log (time order, for the HAC blocks)
    period_s: float


@dataclass(frozen=True, kw_only=True)
class LiftEstimate:
    name: str
    before: float
    value: float
    sigma: float | None  # HAC standard error; None when held
    held: str = ""  # why it was held ("" when fitted)

    @property
    def key(self) -> str:
        return f"lift.{self.name}"


@dataclass(frozen=True, kw_only=True)
class LiftFit:
    estimates: list[LiftEstimate]
    rows: int
    rms_before_a: float
    rms_after_a: float

    def changes(self) -> dict[str, float]:
        """The model keys the fit writes (fitted ones only), SI."""
        return {e.key: e.value for e in self.estimates if not e.held}


def used_rows(lt: Lift, logs: list[liftlog.LiftLog]) -> Rows:
    """Filtered rows (liftlog.motion) whose whole filter window is of one kind: moving beyond the blend
    band one way with the load driving the motor or not throughout (friction and efficiency switch
    between kinds, and a filter across a switch mixes two laws), or standing with a standing setpoint."""
    parts: list[tuple[np.ndarray, ...]] = []
    for k, log in enumerate(logs):
        m = liftlog.motion(log, lt.speed_lsb_mps)
        idx = np.flatnonzero(liftlog.settled(lt, log, m))
        load = log.setpoint["payload_kg"][idx]
        parts.append((load, m.speed[idx], m.accel[idx], m.current[idx], np.full(idx.size, k), idx))
    load, speed, accel, current, group, index = (np.concatenate([p[j] for p in parts]) for j in range(6))
    period = float(np.median(np.diff(logs[0].t)))
    return Rows(
        payload=load,
        speed=speed,
        accel=accel,
        current=current,
        group=group.astype(int),
        index=index.astype(int),
        period_s=period,
    )


def _with(lt: Lift, names: list[str], x: np.ndarray) -> Lift:
    return dataclasses.replace(lt, **{FIELD[n]: float(v) for n, v in zip(names, x)})


def _backdriven(lt: Lift, data: Rows) -> np.ndarray:
    """Rows where the model says the load drives the motor."""
    force = lift.load_force(lt, data.payload, data.speed, data.accel)
    return np.asarray(opposed(force, data.speed) & (np.abs(data.speed) > lift.blend_width(lt)))


def why_held(lt: Lift, data: Rows) -> dict[str, str]:
    """The parameters these rows cannot determine, and why (the further run that would)."""
    held = {}
    loads = data.payload
    if np.ptp(loads) < LOAD_SPREAD * lt.payload_max_kg:
        held["efficiency"] = (
            f"every log has about the same load ({np.min(loads):.3g} .. {np.max(loads):.3g} kg): a run with a load "
            f"{LOAD_SPREAD:.0%} of lift.payload_max apart (bench plan --axis lift --lift-payload) separates it"
        )
    if int(_backdriven(lt, data).sum()) < MIN_ROWS:
        held["backdrive_efficiency"] = "no rows where the load drives the motor"
    up, down = int((data.speed > 0).sum()), int((data.speed < 0).sum())
    if min(up, down) < MIN_ROWS:
        held["coulomb"] = f"the carriage moved one way only ({up} rows up, {down} down)"
    moving = np.abs(data.speed[data.speed != 0])
    if moving.size < MIN_ROWS or np.ptp(moving) < 0.2 * lt.speed_max_mps:
        held["viscous"] = "the carriage moved at one speed only"
    return held


def _scale(lt: Lift, name: str) -> float:
    """A size for each parameter (the fit's coordinates are value / scale): its model value, or a natural
    size where that is near zero (the carriage's weight for forces)."""
    weight = (lt.carriage_mass_kg + lt.payload_max_kg) * G_N
    natural = {"assist_force": weight, "coulomb": 0.05 * weight, "viscous": 0.05 * weight / lt.speed_max_mps}
    return max(abs(float(getattr(lt, FIELD[name]))), natural.get(name, 0.1))


def _solve(lt: Lift, data: Rows, names: list[str]) -> tuple[np.ndarray, np.ndarray]:
    """(fitted values, their HAC covariance) of `names`, the others held at the model's values."""
    from scipy.optimize import least_squares  # here: scipy.optimize takes ~0.3 s to load

    scale = np.array([_scale(lt, n) for n in names])
    x0 = np.array([float(getattr(lt, FIELD[n])) for n in names])
    lo = np.array([BOUNDS[n][0] for n in names]) / scale
    hi = np.array([BOUNDS[n][1] for n in names]) / scale

    def residual(z: np.ndarray) -> np.ndarray:
        model = lift.motor_current(_with(lt, names, z * scale), data.payload, data.speed, data.accel)
        return np.asarray(data.current - model)

    sol = least_squares(residual, np.clip(x0 / scale, lo, hi), bounds=(lo, hi), method="trf", x_scale=1.0)
    block, lags = covariance.settings(data.period_s)
    cov = covariance.hac(sol.jac, sol.fun, group=data.group, time=data.index, block=block, lags=lags)
    return sol.x * scale, cov * np.outer(scale, scale)


def fit(v: Vehicle, logs: list[liftlog.LiftLog]) -> LiftFit:
    """The fit; parameters the rows cannot determine, or determine only to WEAK of their size, are held."""
    lt = v.lift
    assert lt is not None
    data = used_rows(lt, logs)
    held = why_held(lt, data)
    names = [n for n in FREE if n not in held]
    x, cov = _solve(lt, data, names)
    sigma = np.sqrt(np.clip(np.diag(cov), 0, None))
    weak = [n for n, s in zip(names, sigma) if s > WEAK * _scale(lt, n)]
    if weak:
        held.update({n: "the logs determine it too poorly (standard error above a quarter of its size)" for n in weak})
        names = [n for n in names if n not in weak]
        x, cov = _solve(lt, data, names)
        sigma = np.sqrt(np.clip(np.diag(cov), 0, None))
    fitted = _with(lt, names, x)
    estimates = [
        LiftEstimate(
            name=n,
            before=float(getattr(lt, FIELD[n])),
            value=float(getattr(fitted, FIELD[n])),
            sigma=float(sigma[names.index(n)]) if n in names else None,
            held=held.get(n, ""),
        )
        for n in FREE
    ]
    rms = lambda model: float(
        np.sqrt(np.mean((data.current - lift.motor_current(model, data.payload, data.speed, data.accel)) ** 2))
    )  # noqa: E731
    return LiftFit(estimates=estimates, rows=len(data.current), rms_before_a=rms(lt), rms_after_a=rms(fitted))


def text(f: LiftFit) -> str:
    """The fit as a table: each parameter before and after, its standard error, or why it was held."""
    before, after = f.rms_before_a * 1000, f.rms_after_a * 1000
    lines = [f"lift fit over {f.rows} rows: RMS residual {before:.1f} mA before, {after:.1f} mA after"]
    lines.append(f"{'key':28}{'model':>12}{'fitted':>12}{'std. error':>12}  unit")
    for e in f.estimates:
        unit = UNIT.get(e.name, "")
        if e.held:
            lines.append(f"{e.key:28}{e.before:12.5g}{'held':>12}{'':12}  {unit}  ({e.held})")
        else:
            lines.append(f"{e.key:28}{e.before:12.5g}{e.value:12.5g}{e.sigma or 0.0:12.2g}  {unit}")
    lines.append(
        "held as the model gives them: lift.rotor_inertia and lift.counterweight (the fitted carriage mass and "
        "assist force carry any error in them), k_t, lead, gear ratio and deadband"
    )
    return "\n".join(lines)
