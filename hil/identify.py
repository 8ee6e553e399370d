"""Parameter identification from bench logs: one joint least-squares fit over several logs.

The regressors are the dynamics module's own force terms: each column is how the rim force of the
rig changes with one parameter (dynamics.rig_wheel_forces evaluated at nearby parameter values; the
force is affine in every parameter fitted linearly, so the difference is exact). Gauss-Newton steps
handle the products (rolling resistance times mass); the Stribeck speed is found by a one-dimensional
search around the linear fit. Parameters the logs do not excite, or cannot tell apart, are named and
left at their model values.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from kinetab.generator import dynamics
from kinetab.generator.vehicle import Vehicle
from scipy.optimize import least_squares, minimize_scalar

from . import benchdata
from .benchdata import BenchLog

EXCITED_N = 1e-3  # a parameter moving the rim force by less than this RMS (N) at its own size: not excited
COLLINEAR = 1e-3  # a singular value of the normalised regressor below this: parameters cannot be told apart


def _set(v: Vehicle, section: str, **fields: float) -> Vehicle:
    return dataclasses.replace(v, **{section: dataclasses.replace(getattr(v, section), **fields)})


@dataclass(frozen=True)
class Param:
    """A fitted quantity: how to read it from a vehicle and set it, its unit and typical size."""

    name: str
    unit: str
    typical: float
    get: Callable[[Vehicle], float]
    put: Callable[[Vehicle, float], Vehicle]


def _scale_rotating(v: Vehicle, m_rot: float) -> Vehicle:
    k = m_rot / dynamics.reflected_mass(v)
    v = _set(v, "wheels", inertia_kgm2=v.wheels.inertia_kgm2 * k)
    return _set(v, "drive", rotor_inertia_kgm2=v.drive.rotor_inertia_kgm2 * k)


PARAMS = (
    Param("body.mass", "kg", 10.0, lambda v: v.body.mass_kg, lambda v, x: _set(v, "body", mass_kg=x)),
    Param(
        "body.yaw_inertia",
        "kg*m^2",
        1.0,
        lambda v: v.body.mass_kg * v.body.gyration_radius_m**2,
        lambda v, x: _set(v, "body", gyration_radius_m=math.sqrt(max(x, 1e-12) / v.body.mass_kg)),
    ),
    Param("reflected_inertia", "kg", 1.0, dynamics.reflected_mass, _scale_rotating),
    Param("friction.coulomb", "N", 1.0, lambda v: v.friction.coulomb_n, lambda v, x: _set(v, "friction", coulomb_n=x)),
    Param(
        "friction.breakaway",
        "N",
        1.0,
        lambda v: v.friction.breakaway_n,
        lambda v, x: _set(v, "friction", breakaway_n=x),
    ),
    Param(
        "friction.viscous",
        "N*s/m",
        1.0,
        lambda v: v.friction.viscous_ns_per_m,
        lambda v, x: _set(v, "friction", viscous_ns_per_m=x),
    ),
    Param(
        "wheels.rolling_resistance",
        "1",
        0.01,
        lambda v: v.wheels.rolling_resistance,
        lambda v, x: _set(v, "wheels", rolling_resistance=x),
    ),
    Param(
        "casters.rolling_resistance",
        "1",
        0.01,
        lambda v: v.casters.rolling_resistance,
        lambda v, x: _set(v, "casters", rolling_resistance=x),
    ),
)


@dataclass(frozen=True)
class Data:
    """The rows of every log: operating points, rigs and the rim forces the measured currents mean."""

    ops: list[tuple[dynamics.OperatingPoint, str]]
    force: np.ndarray  # measured rim force, both wheels of every log stacked
    accel_source: list[str]


def data(v: Vehicle, logs: list[BenchLog]) -> Data:
    """Smoothed measured speeds, accelerations (setpoint or Savitzky-Golay), and the measured currents
    turned into rim forces with the model's motor constants (which are held)."""
    ops, forces, how = [], [], []
    for log in logs:
        keep = log.valid
        accel, source = benchdata.accelerations(v, log)
        speed = benchdata.smoothed_speed(log)
        op = benchdata.operating_point(log, speed=speed[keep], accel=accel[keep])
        sub = {k: np.asarray(x)[keep] for k, x in vars(op).items()}
        op = dynamics.OperatingPoint(**sub)
        ops.append((op, log.rig))
        current = log.current[keep]
        forces += [
            dynamics.force_from_current(v, current[:, 0], op.speed_right),
            dynamics.force_from_current(v, current[:, 1], op.speed_left),
        ]
        how.append(f"{log.path.name} ({log.rig}): {source}")
    return Data(ops, np.concatenate(forces), how)


def model_force(v: Vehicle, d: Data) -> np.ndarray:
    """The float model's rim forces for every row of the data, stacked like Data.force."""
    out = []
    for op, rig in d.ops:
        right, left = dynamics.rig_wheel_forces(v, op, rig)
        out += [np.asarray(right.total), np.asarray(left.total)]
    return np.concatenate(out)


def regressor(v: Vehicle, d: Data, params: tuple[Param, ...]) -> tuple[np.ndarray, np.ndarray]:
    """(base force, columns): column j is d(force)/d(param j), from the dynamics at two values."""
    base = model_force(v, d)
    cols = []
    for p in params:
        x = p.get(v)
        h = 1e-3 * max(abs(x), p.typical)
        cols.append((model_force(p.put(v, x + h), d) - base) / h)
    return base, np.column_stack(cols)


@dataclass(frozen=True)
class Held:
    """Parameters left at their model values, and why."""

    names: tuple[str, ...]
    why: str


def classify(x: np.ndarray, params: tuple[Param, ...], values: np.ndarray) -> tuple[list[int], list[Held]]:
    """Which parameters the data determines: excited (the force moves at the parameter's size) and not
    collinear with others (singular vectors of the column-normalised regressor)."""
    n = x.shape[0]
    size = np.maximum(np.abs(values), [p.typical for p in params])
    effect = np.linalg.norm(x, axis=0) * size / math.sqrt(n)
    held = [Held((p.name,), "not excited by these logs") for p, e in zip(params, effect) if e < EXCITED_N]
    keep = [j for j, e in enumerate(effect) if e >= EXCITED_N]
    while len(keep) > 1:
        xs = x[:, keep] / np.linalg.norm(x[:, keep], axis=0)
        _, s, vt = np.linalg.svd(xs, full_matrices=False)
        if s[-1] / s[0] >= COLLINEAR:
            break
        group = [keep[i] for i in np.flatnonzero(np.abs(vt[-1]) > 0.2)]
        held.append(Held(tuple(params[j].name for j in group), _combination(x, params, group)))
        keep = [j for j in keep if j not in group]
    return keep, held


def _combination(x: np.ndarray, params: tuple[Param, ...], group: list[int]) -> str:
    """The identifiable combination of parameters the data cannot tell apart: the sum of their effects,
    written relative to the first ('a + k*b' in the first's unit)."""
    norms = np.linalg.norm(x[:, group], axis=0)
    signs = np.sign(np.sum(x[:, group] * x[:, group[:1]], axis=0))
    first = params[group[0]].name
    parts = [first] + [
        f"{s * n / norms[0]:+.4g} x {params[j].name}" for j, n, s in zip(group[1:], norms[1:], signs[1:])
    ]
    return f"cannot be told apart here; only {' '.join(parts)} is identifiable"


@dataclass(frozen=True)
class Fit:
    """The outcome: the fitted vehicle, estimates with standard errors, what was held and why."""

    vehicle: Vehicle
    estimates: dict[str, tuple[float, float, float]]  # name -> (model value, estimate, standard error)
    held: list[Held]
    condition: float
    rms_before_n: float
    rms_after_n: float
    stribeck: tuple[float, float] | None  # (model value, estimate) in m/s, or None when held
    accel_source: list[str]


def _step(x: np.ndarray, r: np.ndarray, robust: bool) -> np.ndarray:
    """Least-squares step for x d = r (columns normalised first); soft-L1 loss when robust."""
    norms = np.linalg.norm(x, axis=0)
    xs = x / norms
    d = np.linalg.lstsq(xs, r, rcond=None)[0]
    if robust:
        scale = 1.4826 * float(np.median(np.abs(r - xs @ d))) or 1.0
        d = least_squares(lambda z: xs @ z - r, d, loss="soft_l1", f_scale=scale).x
    return np.asarray(d / norms)


def gauss_newton(
    v: Vehicle, d: Data, *, robust: bool = False, iterations: int = 4
) -> tuple[Vehicle, list[int], list[Held], np.ndarray]:
    """Fit every determined parameter; returns the vehicle, the fitted indices, the held groups and the
    last regressor (for standard errors)."""
    values = np.array([p.get(v) for p in PARAMS])
    base, x = regressor(v, d, PARAMS)
    keep, held = classify(x, PARAMS, values)
    for _ in range(iterations):
        delta = _step(x[:, keep], d.force - base, robust)
        for j, dj in zip(keep, delta):
            v = PARAMS[j].put(v, PARAMS[j].get(v) + dj)
        base, x = regressor(v, d, PARAMS)
        if np.all(np.abs(delta) <= 1e-7 * np.maximum(np.abs(values[keep]), 1e-9)):
            break
    return v, keep, held, x


def _stribeck(v: Vehicle, d: Data, robust: bool) -> tuple[Vehicle, tuple[float, float] | None]:
    """Search the Stribeck speed (a factor of 5 either way, on a log scale) around the linear fit; held
    when the breakaway force is not fitted (then it has no effect)."""
    v0 = v.friction.stribeck_speed_mps
    if abs(v.friction.breakaway_n - v.friction.coulomb_n) < 1e-6:
        return v, None

    def rss(log_vs: float) -> float:
        trial = _set(v, "friction", stribeck_speed_mps=float(np.exp(log_vs)))
        fitted, _, _, _ = gauss_newton(trial, d, robust=robust, iterations=2)
        return float(np.sum((d.force - model_force(fitted, d)) ** 2))

    best = minimize_scalar(rss, bounds=(math.log(v0 / 5), math.log(v0 * 5)), method="bounded", options={"xatol": 0.02})
    return _set(v, "friction", stribeck_speed_mps=float(np.exp(best.x))), (v0, float(np.exp(best.x)))


def standard_errors(x: np.ndarray, residual: np.ndarray) -> np.ndarray:
    """Ordinary least squares standard errors: sqrt(diag(sigma^2 (X^T X)^-1)), sigma^2 = RSS / (n - p)."""
    dof = max(1, x.shape[0] - x.shape[1])
    sigma2 = float(residual @ residual) / dof
    return np.asarray(np.sqrt(np.maximum(np.diag(sigma2 * np.linalg.pinv(x.T @ x)), 0.0)))


def fit(v: Vehicle, logs: list[BenchLog], *, robust: bool = False, stribeck: bool = True) -> Fit:
    """The joint fit over the logs (see the module docstring)."""
    d = data(v, logs)
    before = float(np.sqrt(np.mean((d.force - model_force(v, d)) ** 2)))
    fitted, keep, held, _ = gauss_newton(v, d, robust=robust)
    strib = None
    if stribeck and "friction.breakaway" in [PARAMS[j].name for j in keep]:
        fitted, strib = _stribeck(fitted, d, robust)
        fitted, keep, held, _ = gauss_newton(fitted, d, robust=robust)
    base, x = regressor(fitted, d, PARAMS)
    residual = d.force - base
    xk = x[:, keep]
    se = standard_errors(xk, residual)
    estimates = {PARAMS[j].name: (PARAMS[j].get(v), PARAMS[j].get(fitted), float(se[i])) for i, j in enumerate(keep)}
    s = np.linalg.svd(xk / np.linalg.norm(xk, axis=0), compute_uv=False) if keep else np.array([1.0])
    after = float(np.sqrt(np.mean(residual**2)))
    return Fit(
        fitted, estimates, held, float(s[0] / s[-1]) if len(s) else float("nan"), before, after, strib, d.accel_source
    )


def model_changes(f: Fit) -> dict[str, float]:
    """The model keys to write (SI): the fitted body, friction and rolling values; the reflected inertia
    is reported only (its split between wheel and rotor is not identifiable)."""
    v, out = f.vehicle, {}
    names = set(f.estimates)
    if "body.mass" in names:
        out["body.mass"] = v.body.mass_kg
    if "body.yaw_inertia" in names or "body.mass" in names:
        out["body.gyration_radius"] = v.body.gyration_radius_m
    for key, field in (
        ("friction.coulomb", "coulomb_n"),
        ("friction.breakaway", "breakaway_n"),
        ("friction.viscous", "viscous_ns_per_m"),
    ):
        if key in names:
            out[key] = getattr(v.friction, field)
    if f.stribeck is not None:
        out["friction.stribeck_speed"] = v.friction.stribeck_speed_mps
    for key, sec in (("wheels.rolling_resistance", "wheels"), ("casters.rolling_resistance", "casters")):
        if key in names:
            out[key] = getattr(v, sec).rolling_resistance
    return out
