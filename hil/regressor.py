"""The bench fit's data and its rim-force model, built from the dynamics module and nothing else.

Data: both wheels of every log stacked (right rows, then left rows, log after log). The measured
speeds, their finite-difference derivative and the measured currents all pass through the same
zero-phase low-pass filter ("parallel filtering", common practice in robot identification; Gautier
and Khalil, from memory): the model is linear in the accelerations, so filtering both sides alike keeps the
inertia estimates free of the smoothing lag. A derivative by a Savitzky-Golay filter of the speeds
against currents smoothed differently biased the inertias by 5-10 % here; its weak stopband let the
encoder's quantisation noise through, which biased the yaw inertia by another 11 % (errors in the
regressor shrink its estimate).

Model: the rim force is affine in each of the first eight fit coordinates, with products only between
the body mass and the two rolling-resistance coefficients; the Stribeck speed enters through one
friction shape. So a few evaluations of dynamics.rig_wheel_forces give the force, exactly, for any
coordinates: F(x) = F(x0) + B (x - x0) + X_w dm dc_w + X_c dm dc_c. A test checks that identity
against the dynamics at random coordinates, so a change of the physics cannot slip past it.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
from kinetab.generator import dynamics
from kinetab.generator.vehicle import Vehicle

from . import countlattice
from . import fitparams as fp
from .benchdata import BenchLog

CUTOFF_HZ = 15.0  # low-pass cutoff of the fit's filter (measured: 10-20 Hz keep the bias below 1 %)
OTHER_CUTOFFS_HZ = (10.0, 20.0)  # the fit is repeated with these cutoffs: the change counts as systematic error
COARSE_SHARE = 0.1
"""The highest cutoff is at most this share of a log's sample rate: coarser logs filter all three cutoffs
proportionally lower (cutoff_for). Measured on eight invented vehicles, 20 s campaigns, 1 % noise, two
draws: at 50 ms the cutoffs as they were (all three clipped to one filter at 0.9 x Nyquist) left 20 % of
estimates beyond 2 sigma (root mean square z 1.44); scaled, 7 % (1.07). At 20 ms, 7 % either way."""


@dataclass(frozen=True)
class Rows:
    """The fit's rows: operating points per log (with its rig), and per stacked row the filtered
    measured force columns (N, see measured_columns), the wheel speed (m/s), which log and sample."""

    ops: list[tuple[dynamics.OperatingPoint, str]]
    measured: np.ndarray  # (n, 2)
    speed: np.ndarray
    log: np.ndarray  # int, index of the log
    sample: np.ndarray  # int, sample index within its log
    how: list[str]
    weight: np.ndarray  # 1 for rows the fit uses, 0 for rows whose window mixes directions of power flow

    def __len__(self) -> int:
        return len(self.speed)


def smooth(x: np.ndarray, dt: float, cutoff_hz: float = CUTOFF_HZ) -> np.ndarray:
    """The one low-pass filter every signal goes through: a 2nd-order Butterworth run forward and
    backward (filtfilt: zero phase, 4th-order roll-off) at cutoff_hz. Being linear and time-invariant it
    commutes with differentiation, so the filtered acceleration is the derivative of the filtered speed;
    its steep stopband removes the encoder's quantisation noise, which differentiation amplifies. (A
    windowed-sinc FIR of the same cutoff needs a window three times as long, and the longer window
    doubted so many rows that the fit lost its footing: measured, -23 % on a rolling resistance.)"""
    from scipy.signal import butter, filtfilt  # here, not at import: scipy.signal takes ~0.5 s to load

    b, a = butter(2, min(cutoff_hz * 2 * dt, 0.9))
    pad = min(len(x) - 1, 3 * int(1 / (cutoff_hz * dt)))
    return np.asarray(filtfilt(b, a, x, axis=0, padtype="odd", padlen=pad))


def cutoff_for(dt: float, cutoff_hz: float = CUTOFF_HZ) -> float:
    """The cutoff (Hz) a log of sample period dt (s) is filtered at: cutoff_hz, scaled down with the
    others for a coarse log so the highest stays within COARSE_SHARE of the sample rate; kept apart, the
    variants still measure what the choice of cutoff changes (identify._filter_spread)."""
    return cutoff_hz * min(1.0, COARSE_SHARE / (dt * max(OTHER_CUTOFFS_HZ)))


def window(log: BenchLog, cutoff_hz: float = CUTOFF_HZ) -> tuple[int, float]:
    """The filter's reach in samples (odd, >= 5: 1.5 periods of the cutoff, where its impulse response
    has mostly died down) and the sample period, s."""
    dt = float(np.median(np.diff(log.t)))
    return max(5, int(round(1.5 / (cutoff_hz * dt))) | 1), dt


def _roll(x: np.ndarray, n: int, how: str) -> np.ndarray:
    """Running minimum or maximum over n samples, centred (edges: the nearest value repeated)."""
    padded = np.pad(x, n // 2, mode="edge")
    view = np.lib.stride_tricks.sliding_window_view(padded, n)
    return np.asarray(view.min(axis=1) if how == "min" else view.max(axis=1))


def decimation(dt: float, cutoff_hz: float = CUTOFF_HZ) -> int:
    """Keep every k-th filtered row: k such that the rows still come at 4 x the cutoff or faster. The
    filter has removed what lies above the cutoff, so the rows between carry little more, and the fit
    works on 1/k of the rows (filter, then decimate: common practice in robot identification)."""
    return max(1, int(1 / (4 * cutoff_hz * dt)))


def _usable(log: BenchLog, half: int) -> np.ndarray:
    """Rows whose whole filter window holds valid measurements (and is inside the log)."""
    bad = np.convolve((~log.valid).astype(float), np.ones(2 * half + 1), mode="same") > 0
    keep = ~bad
    keep[:half], keep[len(keep) - half :] = False, False
    return keep


def rows(v: Vehicle, logs: list[BenchLog], *, cutoff_hz: float = CUTOFF_HZ) -> Rows:
    """Filter every log alike and stack both wheels; rows whose window holds an invalid sample are dropped.

    The measured current is split by the direction of power flow before filtering (the split is not
    linear; each part is). The direction is the filtered current's: the raw sign let the noise choose
    which rows near zero current were kept (a window holding both signs is dropped). Regression (a trial,
    noise 5 % of the limit, 4 x 10 s logs): with ForceModel.residual's old form, a mass 4.6-5.6 sigma off
    in every draw alike; this alone brought two vehicles' masses within 3.1 sigma.
    Rows are weighted 0 where the window crosses a friction kink or a change of direction. A coarse log
    is filtered lower (cutoff_for)."""
    parts: list[list[np.ndarray]] = [[] for _ in range(6)]
    ops, how = [], []
    for k, log in enumerate(logs):
        c = cutoff_for(window(log)[1], cutoff_hz)
        n, dt = window(log, c)
        raw = countlattice.on_counts(log.speed, v.firmware.speed_lsb_mps)
        speed = smooth(raw, dt, c)
        accel = smooth(np.gradient(raw, dt, axis=0), dt, c)
        s = log.setpoint
        op_all = dynamics.OperatingPoint(
            payload_kg=s["payload_kg"],
            speed_right=speed[:, 0],
            speed_left=speed[:, 1],
            accel_right=accel[:, 0],
            accel_left=accel[:, 1],
            pitch_rad=s["pitch_rad"],
            roll_rad=s["roll_rad"],
        )
        keep = _usable(log, n // 2) & (np.arange(len(log)) % decimation(dt, c) == 0)
        turning = turn_kinked(v, speed[:, 0] - speed[:, 1], n // 2, raw=raw[:, 0] - raw[:, 1])
        ops.append((dynamics.OperatingPoint(**{f: np.asarray(x)[keep] for f, x in vars(op_all).items()}), log.rig))
        idx = np.flatnonzero(keep)
        flows = smooth(log.current, dt, c)
        for side in (0, 1):
            flow = flows[:, side]
            split = measured_columns(v, log.current[:, side], speed[:, side], flow)
            filtered = smooth(split, dt, c)
            doubtful = _doubtful(flow, speed[:, side], n // 2)
            doubtful |= kinked(v, speed[:, side], n // 2, raw=raw[:, side])
            doubtful |= blended(v, flow, speed[:, side], n // 2) | turning
            for bucket, item in zip(
                parts, (filtered[keep], speed[keep, side], np.full(len(idx), k), idx, (~doubtful[keep]).astype(float))
            ):
                bucket.append(item)
        how.append(_described(v, log, cutoff_hz=c, dt=dt, kept=len(idx)))
    measured, speeds, which, sample, weight = (np.concatenate(b) for b in parts[:5])
    return Rows(ops=ops, measured=measured, speed=speeds, log=which, sample=sample, how=how, weight=weight)


def _described(v: Vehicle, log: BenchLog, *, cutoff_hz: float, dt: float, kept: int) -> str:
    """The fit's data line for one log: its rows, the filter's cutoff (Hz), the decimation, the rows kept,
    and the encoder count its speeds were taken back to (if any)."""
    count = countlattice.count_step(log.speed, v.firmware.speed_lsb_mps)
    counted = "" if count is None else f"; speeds taken back to whole encoder counts of {count * 1000:.5g} mm/s"
    return (
        f"{log.path.name} ({log.rig}): {len(log)} rows through one zero-phase low-pass filter "
        f"({cutoff_hz:.3g} Hz), then one row in {decimation(dt, cutoff_hz)}: {kept} rows{counted}"
    )


def _doubtful(force: np.ndarray, speed: np.ndarray, half: int) -> np.ndarray:
    """Rows whose filter window holds both directions of power flow."""
    back = dynamics.opposed(force, speed).astype(float)
    frac = np.convolve(back, np.ones(2 * half + 1) / (2 * half + 1), mode="same")
    return (frac > 0) & (frac < 1)


def kinked(v: Vehicle, speed: np.ndarray, half: int, *, raw: np.ndarray | None = None) -> np.ndarray:
    """Rows whose filter window reaches into the deadband (|speed| below its edge, zero crossings
    included): friction there is the model's steep stand-in for stiction, it bends at the edges, and
    the filtered force differs from the force at the filtered speed. With the measured speeds (`raw`),
    the window is judged on them too: a wheel sticking and slipping at the deadband's edge crosses it
    between samples while its filtered speed stays outside (a trial's 'gap' deadband left 19 N RMS of
    residual on such rows)."""
    lo, hi = _roll(speed, 2 * half + 1, "min"), _roll(speed, 2 * half + 1, "max")
    if raw is not None:
        lo = np.minimum(lo, _roll(raw, 2 * half + 1, "min"))
        hi = np.maximum(hi, _roll(raw, 2 * half + 1, "max"))
    edge = v.friction.deadband_mps
    return (lo < edge) & (hi > -edge)


def turn_kinked(v: Vehicle, difference: np.ndarray, half: int, *, raw: np.ndarray | None = None) -> np.ndarray:
    """A skid-steer's rows whose filter window crosses an end of the turning resistance's ramp (|u_R - u_L| =
    track x skid.turn_transition), where it bends from a slope to a constant (as `kinked` for friction,
    the raw differences judged too); none on two drive wheels and casters."""
    if v.skid is None:
        return np.zeros(len(difference), dtype=bool)
    lo, hi = _roll(difference, 2 * half + 1, "min"), _roll(difference, 2 * half + 1, "max")
    if raw is not None:
        lo = np.minimum(lo, _roll(raw, 2 * half + 1, "min"))
        hi = np.maximum(hi, _roll(raw, 2 * half + 1, "max"))
    edge = v.wheels.track_m * v.skid.turn_transition_radps
    return ((lo < edge) & (hi > edge)) | ((lo < -edge) & (hi > -edge))


def blended(v: Vehicle, current: np.ndarray, speed: np.ndarray, half: int) -> np.ndarray:
    """Rows whose filter window holds a back-driven row inside the blend band (|speed| below
    dynamics.blend_width): there the efficiency is between its two values, which the fit's split of
    the measured force into a motoring and a back-driving column does not describe."""
    inside = dynamics.opposed(current, speed) & (np.abs(speed) < dynamics.blend_width(v))
    return _roll(inside.astype(float), 2 * half + 1, "max") > 0


def model_force(v: Vehicle, data: Rows) -> np.ndarray:
    """The float model's rim force for every stacked row, N."""
    out = []
    for op, rig in data.ops:
        right, left = dynamics.rig_wheel_forces(v, op, rig)
        n = np.shape(np.asarray(op.speed_right))
        out += [np.broadcast_to(right.total, n), np.broadcast_to(left.total, n)]
    return np.concatenate(out)


def measured_columns(v: Vehicle, current: np.ndarray, speed: np.ndarray, flow: np.ndarray) -> np.ndarray:
    """(n, 2): the measured current as rim force at unit efficiencies, split by the direction of power
    flow that `flow` (a current) and speed give (motoring, back-driving); the measured force is
    efficiency * col 0 + backdrive_factor * col 1."""
    unit = dataclasses.replace(v, drive=dataclasses.replace(v.drive, efficiency=1.0, backdrive_efficiency=1.0))
    force = dynamics.force_from_current(unit, current, speed)  # at unit efficiencies: no choice of direction
    back = dynamics.opposed(flow, speed)
    return np.column_stack([np.where(back, 0.0, force), np.where(back, force, 0.0)])


def _excess_shape(v: Vehicle, data: Rows, stribeck_mps: float) -> np.ndarray:
    """d(friction)/d(breakaway excess) per row at this Stribeck speed: the Stribeck bump of unit height."""
    f = dataclasses.replace(
        v.friction, coulomb_n=0.0, breakaway_n=1.0, viscous_ns_per_m=0.0, stribeck_speed_mps=stribeck_mps
    )
    return np.asarray(dynamics.drivetrain_friction(dataclasses.replace(v, friction=f), data.speed), float)


@dataclass(frozen=True)
class ForceModel:
    """F(x) for the stacked rows in fit coordinates x (fitparams.NAMES), exact for this vehicle's geometry."""

    vehicle: Vehicle
    data: Rows
    x0: np.ndarray
    f0: np.ndarray
    cols: np.ndarray  # (n, 8): dF/dx_j at x0, linear coordinates
    cross: np.ndarray  # (n, 2): d2F/(d mass d c_w), d2F/(d mass d c_c)
    measured: np.ndarray  # (n, 2) measured_columns

    def force(self, x: np.ndarray) -> np.ndarray:
        d = x[:8] - self.x0[:8]
        out = self.f0 + self.cols @ d + self.cross @ (d[0] * d[6:8])
        excess, v_s = x[fp.INDEX["friction.breakaway_excess"]], x[fp.INDEX["friction.stribeck_speed"]]
        if v_s != self.x0[10]:
            out = out + excess * (_excess_shape(self.vehicle, self.data, float(v_s)) - self.cols[:, 4])
        return np.asarray(out)

    def residual(self, x: np.ndarray) -> np.ndarray:
        """Measured minus model, per row (0 on rows of weight 0), as rim force at unit efficiencies, N:
        the measured current's force less F(x) over the row's efficiency (motoring or back-driving).
        In the current's own terms, so its noise stays on this side: written as efficiency * measured - F,
        the noisy current sat in a regressor and pulled the scale every force shares (mass, inertias,
        both efficiencies) toward zero (errors in variables; measured on float-model logs with white
        noise 5 % of the current limit: -8 to -10 %, 3 sigma)."""
        return np.asarray((self.measured.sum(axis=1) - self.force(x) / self._efficiency(x)) * self.data.weight)

    def _efficiency(self, x: np.ndarray) -> np.ndarray:
        """Per row, the coordinate the model's force is divided by: the motoring efficiency, or on
        back-driving rows the back-driving factor."""
        return np.where(self._back, x[9], x[8])

    @property
    def _back(self) -> np.ndarray:
        """Rows on the back-driving column (the other is the filter's tail there, or both are zero)."""
        return np.abs(self.measured[:, 1]) > np.abs(self.measured[:, 0])

    def jacobian(self, x: np.ndarray) -> np.ndarray:
        """d(residual)/dx, (n, 11)."""
        d = x[:8] - self.x0[:8]
        j = np.empty((len(self.f0), len(fp.NAMES)))
        j[:, 8:10] = 0.0  # set below; not left as garbage for the division (it overflowed: RuntimeWarnings)
        j[:, :8] = -self.cols
        j[:, 0] -= self.cross @ d[6:8]
        j[:, 6:8] -= self.cross * d[0]
        v_s = float(x[10])
        shape = _excess_shape(self.vehicle, self.data, v_s) if v_s != self.x0[10] else self.cols[:, 4]
        j[:, 4] = -shape
        h = 1e-4 * v_s
        j[:, 10] = -x[4] * (_excess_shape(self.vehicle, self.data, v_s + h) - shape) / h
        eff, back = self._efficiency(x), self._back
        j /= eff[:, None]  # the force's columns (8 and 9 are set below)
        over = self.force(x) / eff**2
        j[:, 8], j[:, 9] = np.where(back, 0.0, over), np.where(back, over, 0.0)
        return j * self.data.weight[:, None]


def force_model(v: Vehicle, data: Rows) -> ForceModel:
    """Evaluate the dynamics at the model and at one step along each linear coordinate (and the two
    mass-rolling pairs): 11 evaluations, after which every fit step is linear algebra."""
    x0 = fp.values(v)
    step = fp.scales(v, x0)
    at = lambda x: model_force(fp.vehicle_with(v, x), data)  # noqa: E731
    f0 = at(x0)
    shifted = {}
    for j in range(8):
        x = x0.copy()
        x[j] += step[j]
        shifted[j] = at(x)
    cols = np.column_stack([(shifted[j] - f0) / step[j] for j in range(8)])
    cross = []
    for j in (6, 7):
        x = x0.copy()
        x[0] += step[0]
        x[j] += step[j]
        cross.append((at(x) - shifted[0] - shifted[j] + f0) / (step[0] * step[j]))
    return ForceModel(
        vehicle=v, data=data, x0=x0, f0=f0, cols=cols, cross=np.column_stack(cross), measured=data.measured
    )
