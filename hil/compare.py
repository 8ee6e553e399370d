"""Measured against predicted motor current, per wheel and per phase, with a pass/fail against a
tolerance and a hint of which model term the residual looks like."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from kinetab.generator import dynamics, interface
from kinetab.generator.vehicle import Vehicle

from . import benchdata
from .benchdata import BenchLog
from .planfile import PHASES


@dataclass(frozen=True)
class Stats:
    rms: float
    max: float
    bias: float
    rows: int


def stats(residual: np.ndarray) -> Stats:
    if residual.size == 0:
        return Stats(rms=0.0, max=0.0, bias=0.0, rows=0)
    return Stats(
        rms=float(np.sqrt(np.mean(residual**2))),
        max=float(np.max(np.abs(residual))),
        bias=float(np.mean(residual)),
        rows=int(residual.size),
    )


def term_regressors(v: Vehicle, log: BenchLog, op: dynamics.OperatingPoint, rig: str) -> dict[str, np.ndarray]:
    """Each model term's share of the motor current (n, 2), A: what a wrong term would leave behind."""
    right, left = dynamics.rig_wheel_forces(v, op, rig)
    gain = dynamics.motor_gain(v)
    coulomb_like = np.column_stack(
        [dynamics.deadband_shape(v, op.speed_right), dynamics.deadband_shape(v, op.speed_left)]
    )
    out = {
        name: np.column_stack([getattr(right, name), getattr(left, name)]) * gain
        for name in ("inertia", "coriolis", "rolling", "gravity") + (("turning",) if v.skid is not None else ())
    }
    out["friction (Coulomb-like, sign of speed)"] = coulomb_like * gain
    out["friction (viscous, speed)"] = np.column_stack([op.speed_right, op.speed_left]) * gain
    return out


def likely_terms(residual: np.ndarray, regs: dict[str, np.ndarray]) -> list[tuple[str, float]]:
    """Correlation of the residual with each term's regressor, strongest first."""
    r = residual.ravel()
    out = []
    for name, x in regs.items():
        x = x.ravel()
        if np.std(x) > 0 and np.std(r) > 0:
            out.append((name, float(np.corrcoef(r, x)[0, 1])))
    return sorted(out, key=lambda t: -abs(t[1]))


SPEED_SAMPLES = 9
"""Speeds across each row's speed uncertainty at which the model is evaluated (plus the deadband and
blend edges inside it, where the model steps or bends)."""


DERIVATIVE_WINDOWS_S = (benchdata.SG_WINDOW_S, benchdata.SG_WINDOW_S / 2, benchdata.SG_WINDOW_S / 4)
"""The Savitzky-Golay windows whose derivatives of the measured speeds bound the acceleration with the
setpoint's: where the acceleration itself changes fast (a wheel that does not track, a light wheel
lifted), the longer window lags it and the shorter follows (_accel_range)."""
FAST_SIGMAS = 3.0
"""A shorter window's derivative joins the band where it departs from the 0.1 s one by more than this
many of its own scatter about it: beyond the noise, so the acceleration really changed fast there."""


@dataclass(frozen=True)
class Band:
    """The model's current over the measured motion's uncertainty (n, 2), A, and that uncertainty."""

    low: np.ndarray
    high: np.ndarray
    speed_margin_mps: np.ndarray  # per wheel: the speed uncertainty (twice the RMS of raw less smoothed)


def band(v: Vehicle, log: BenchLog, rig: str, *, smooth: np.ndarray) -> Band:
    """The lowest and highest model current per row and wheel over the motion the log allows: speeds within
    twice the RMS scatter of the measured speeds about their smoothed curve (encoder quantisation), and
    accelerations anywhere between the setpoint's and the derivatives of the measured speeds (_accel_range).
    The current
    is monotone in the accelerations (the mass matrix is positive, the efficiency factor positive), so
    their ends suffice; in speed the model bends and steps (Stribeck, deadband, blend), so it is sampled.
    `smooth`: benchdata.smoothed_speed(log, speed_lsb), made once by the caller."""
    margin = 2 * np.sqrt(np.mean((log.speed - smooth)[log.valid] ** 2, axis=0)) if log.valid.any() else np.zeros(2)
    sp_acc = np.column_stack([log.setpoint["accel_right"], log.setpoint["accel_left"]])
    acc_lo, acc_hi = _accel_range(v, log, sp_acc)
    low = np.full(smooth.shape, np.inf)
    high = np.full(smooth.shape, -np.inf)
    for offset in _speed_offsets(v, smooth, margin):
        speed = smooth + offset
        for ar, al in ((acc_lo, acc_lo), (acc_lo, acc_hi), (acc_hi, acc_lo), (acc_hi, acc_hi)):
            acc = np.column_stack([ar[:, 0], al[:, 1]])
            cur = benchdata.predicted_current(v, benchdata.operating_point(log, speed=speed, accel=acc), rig)
            low, high = np.minimum(low, cur), np.maximum(high, cur)
    return Band(low=low, high=high, speed_margin_mps=margin)


def _accel_range(v: Vehicle, log: BenchLog, sp_acc: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per row and wheel, the lowest and highest acceleration (m/s^2) the log allows: the setpoint's and
    the 0.1 s derivative of the measured speeds; a shorter window's only where it departs from the long
    one by more than FAST_SIGMAS of its own scatter about it (robust: 1.4826 x the median absolute
    deviation), so its noise does not widen the band where the acceleration changes slowly."""
    lsb = v.firmware.speed_lsb_mps
    long_s, *shorter = DERIVATIVE_WINDOWS_S
    long = benchdata.derivative(log, lsb, long_s)
    lo, hi = np.minimum(sp_acc, long), np.maximum(sp_acc, long)
    seen = {benchdata.window_samples(log, long_s)}
    for w in shorter:
        if benchdata.window_samples(log, w) in seen:  # a coarse log: the same 5 samples again
            continue
        seen.add(benchdata.window_samples(log, w))
        short = benchdata.derivative(log, lsb, w)
        d = short - long
        scatter = 1.4826 * np.median(np.abs(d - np.median(d, axis=0)), axis=0)
        fast = np.abs(d) > FAST_SIGMAS * scatter
        lo, hi = np.where(fast, np.minimum(lo, short), lo), np.where(fast, np.maximum(hi, short), hi)
    return lo, hi


def _speed_offsets(v: Vehicle, smooth: np.ndarray, margin: np.ndarray) -> list[np.ndarray]:
    """Offsets (n, 2) from the smoothed speeds: evenly across +-margin, and onto each side of every speed
    where the model steps or bends (+-deadband, +-blend width) that lies within the margin."""
    out = [np.broadcast_to(f * margin, smooth.shape) for f in np.linspace(-1, 1, SPEED_SAMPLES)]
    tiny = 1e-9
    for edge in (v.friction.deadband_mps, dynamics.blend_width(v)):
        for target in (edge - tiny, edge + tiny, -edge - tiny, -edge + tiny):
            offset = target - smooth
            out.append(np.where(np.abs(offset) <= margin, offset, 0.0))
    return out


def compare(v: Vehicle, log: BenchLog, *, tolerance_a: float | None = None) -> dict[str, Any]:
    """The comparison document (SI units, A): see README for every field."""
    rig = log.rig
    accel, how = benchdata.accelerations(v, log)
    sp = np.column_stack([log.setpoint["speed_right"], log.setpoint["speed_left"]])
    sp_acc = np.column_stack([log.setpoint["accel_right"], log.setpoint["accel_left"]])
    at_setpoint = benchdata.predicted_current(v, benchdata.operating_point(log, speed=sp, accel=sp_acc), rig)
    smooth = benchdata.smoothed_speed(log, v.firmware.speed_lsb_mps)
    op = benchdata.operating_point(log, speed=smooth, accel=accel)
    at_measured = benchdata.predicted_current(v, op, rig)
    rng = band(v, log, rig, smooth=smooth)
    primary = np.clip(log.current, rng.low, rng.high)  # the model current nearest the measured one
    ok = log.valid
    residual = (log.current - primary)[ok]
    noise = benchdata.noise_floor(log)
    tol = tolerance_a if tolerance_a is not None else math.hypot(v.firmware.current_budget_a, noise)
    per_wheel = {s: stats(residual[:, k]) for k, s in enumerate(interface.SIDES)}
    passed = all(st.rms <= tol for st in per_wheel.values())
    phases = log.phase[ok]
    return {
        "log": str(log.path),
        "rig": rig,
        "rows": int(ok.sum()),
        "accelerations": how,
        "predicted_at": "the measured motion within its uncertainty",
        "speed_margin": {s: float(rng.speed_margin_mps[k]) for k, s in enumerate(interface.SIDES)},
        "noise_floor_a": noise,
        "tolerance_a": tol,
        "tolerance_rule": "given by --tolerance"
        if tolerance_a is not None
        else "sqrt(current_budget^2 + noise_floor^2), on the RMS residual of each wheel",
        "passed": passed,
        "wheels": {s: vars(st) for s, st in per_wheel.items()},
        "at_setpoint": {s: vars(stats((log.current - at_setpoint)[ok][:, k])) for k, s in enumerate(interface.SIDES)},
        "at_measured": {s: vars(stats((log.current - at_measured)[ok][:, k])) for k, s in enumerate(interface.SIDES)},
        "phases": {
            p: {s: vars(stats(residual[phases == p][:, k])) for k, s in enumerate(interface.SIDES)}
            for p in PHASES
            if np.any(phases == p)
        },
        "likely_terms": [
            {"term": n, "correlation": c}
            for n, c in likely_terms(residual, {k: x[ok] for k, x in term_regressors(v, log, op, rig).items()})[:3]
        ],
        "series": {"predicted": primary, "residual_full": log.current - primary},
    }


def text(doc: dict[str, Any]) -> str:
    """The comparison as a short table for the terminal."""
    lines = [
        f"{doc['log']} ({doc['rig']}, {doc['rows']} rows): measured current - model at {doc['predicted_at']}",
        f"{'':14}{'RMS right':>11}{'RMS left':>10}{'max':>9}{'bias':>9}  [mA]",
    ]
    row = lambda name, d: (
        f"{name:14}{d['right']['rms'] * 1000:11.1f}{d['left']['rms'] * 1000:10.1f}"  # noqa: E731
        f"{max(d['right']['max'], d['left']['max']) * 1000:9.1f}"
        f"{(d['right']['bias'] + d['left']['bias']) * 500:9.1f}"
    )
    lines.append(row("all", doc["wheels"]))
    for phase, d in doc["phases"].items():
        lines.append(row(phase, d))
    lines.append(row("at setpoints", doc["at_setpoint"]))
    lines.append(row("at measured", doc["at_measured"]))
    margin = max(doc["speed_margin"].values()) * 1000
    lines.append(
        f"model range: speeds within +-{margin:.2f} mm/s of the smoothed measured speeds, accelerations between "
        "the setpoint's and the measured; the residual is the distance from it"
    )
    lines.append(f"at measured: smoothed measured speeds with {doc['accelerations']}")
    lines.append(
        f"noise floor {doc['noise_floor_a'] * 1000:.1f} mA; tolerance {doc['tolerance_a'] * 1000:.1f} mA "
        f"({doc['tolerance_rule']})"
    )
    if doc["likely_terms"]:
        best = doc["likely_terms"][0]
        lines.append(f"the residual looks most like: {best['term']} (correlation {best['correlation']:+.2f})")
    lines.append("PASS" if doc["passed"] else "FAIL: the model does not match the bench within the tolerance")
    return "\n".join(lines)
