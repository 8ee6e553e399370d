"""The lift's bench log: one CSV row per lift setpoint as its sample arrives (flushed), with the same JSON
side file as the drive's log (hil/runner.py), and the log read back for compare and fit."""

from __future__ import annotations

import csv
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Any

import numpy as np
from kinetab.generator import interface, lift
from kinetab.generator.dynamics import opposed
from kinetab.generator.errors import UserError
from kinetab.generator.vehicle import Lift, Vehicle

from . import benchdata, countlattice, liftplan, messages, planfile

COLUMNS = (
    "t",
    "seq",
    "phase",
    *liftplan.COLUMNS[1:],
    "ff_lift_current",
    "lift_current",
    "measured_lift_speed",
    "status",
    "clamped",
)
"""SI units: s, m/s, m/s^2, kg, A; the setpoint columns hold what the controller received (its steps
times their step); status and clamped are the sample's bits."""


class LiftLogWriter:
    """Appends rows to LOG.csv as lift samples arrive; every row is flushed at once."""

    def __init__(self, path: Path, vehicle: Vehicle, plan: liftplan.LiftPlan, steps: np.ndarray) -> None:
        assert vehicle.lift is not None
        self.path, self.lift, self.plan, self.steps, self.vehicle = path, vehicle.lift, plan, steps, vehicle
        try:
            self._file: IO[str] = path.open("w", encoding="utf-8", newline="")
        except OSError as exc:
            raise UserError(f"{path}: cannot write the log ({exc.strerror})") from None
        self._csv = csv.writer(self._file, lineterminator="\n")
        self._csv.writerow(COLUMNS)
        self._file.flush()
        self.rows = 0

    def add(self, index: int, sample: messages.LiftSample) -> None:
        """The row of plan row `index` with its sample (SI units)."""
        st = interface.LIFT_IN
        fields = interface.rows_to_fields(st, self.steps[index : index + 1])
        si = interface.struct_si(self.vehicle, st, fields)
        setpoint = [float(np.ravel(si[a])[0]) for a in st.si_names().values()]
        amps = [sample.ff[0] * self.lift.current_lsb_a, sample.measured[0] * self.lift.current_lsb_a]
        speed = sample.measured[1] * self.lift.speed_lsb_mps
        row: list[Any] = [f"{self.plan.columns['t'][index]:.6f}", sample.seq, self.plan.phase[index]]
        row += [f"{x:.9g}" for x in [*setpoint, *amps, speed]] + [sample.status, sample.clamped]
        self._csv.writerow(row)
        self._file.flush()
        self.rows += 1

    def close(self) -> None:
        self._file.close()


@dataclass(frozen=True)
class LiftLog:
    """One lift log: SI arrays, the phase per row, which rows carry a valid measurement."""

    path: Path
    t: np.ndarray
    phase: np.ndarray
    setpoint: dict[str, np.ndarray]  # interface.LIFT_IN SI names: speed_mps, accel_mps2, payload_kg
    ff: np.ndarray  # A, the controller's feed-forward
    current: np.ndarray  # A, measured
    speed: np.ndarray  # m/s, measured
    valid: np.ndarray  # bool
    meta: dict[str, Any] = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.t)


def is_lift_log(path: Path) -> bool:
    """True when the file's first line is a lift log's header."""
    return planfile.header_starts(path, COLUMNS[:4])


def read_log(path: Path) -> LiftLog:
    """Read a lift LOG.csv (and LOG.json); one UserError line naming the file, line and column."""
    rows = benchdata.csv_header(path)
    if tuple(rows) != COLUMNS:
        raise UserError(f"{path}:1: expected a lift log with the header {','.join(COLUMNS)}")
    num, phase, cut = benchdata.read_table(path, COLUMNS)
    names = [c for c in COLUMNS if c != "phase"]
    get = {c: num[:, names.index(c)] for c in names}
    meta = benchdata.side_file(path) | ({benchdata.CUT: True} if cut else {})
    benchdata.rows_as_written(path, meta, len(num) + cut)
    setpoint = {si: get[f"lift_{c}"] for c, si in interface.LIFT_IN.si_names().items()}
    return LiftLog(
        path=path,
        t=get["t"],
        phase=phase,
        setpoint=setpoint,
        ff=get["ff_lift_current"],
        current=get["lift_current"],
        speed=get["measured_lift_speed"],
        valid=(get["status"].astype(int) & messages.STATUS_MEASURED) != 0,
        meta=meta,
    )


@dataclass(frozen=True)
class Motion:
    """The carriage's measured motion and current through one filter: the acceleration is the quadratic
    Savitzky-Golay derivative of the measured speed over benchdata.SG_WINDOW_S, which is exactly a
    weighted mean of the one-period accelerations (summation by parts: parabolic weights); speed and
    current are averaged with the same weights, so the current's linear dependence on acceleration, speed
    and load holds between the filtered values as between the true ones. (The current unfiltered against
    the filtered acceleration showed a carriage heavier by 3 %: the filter flattens acceleration peaks.)"""

    speed: np.ndarray  # m/s
    accel: np.ndarray  # m/s^2
    current: np.ndarray  # A, measured, filtered
    scatter_mps: float  # RMS of measured - filtered speed
    half: int  # rows on each side of a row that its filtered values depend on
    edge: np.ndarray  # bool: within `half` rows of the log's ends (the filter runs past them)


def weights(half: int) -> np.ndarray:
    """The quadratic Savitzky-Golay derivative over 2 half + 1 rows as weights on the 2 half one-period
    differences: proportional to half (half + 1) - j (j + 1), j = -half .. half - 1, summing to 1."""
    j = np.arange(-half, half)
    w = (half * (half + 1) - j * (j + 1)).astype(float)
    return w / w.sum()


def _mean(x: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Row i: sum_j w_j (x[i+j] + x[i+j+1]) / 2 (the mid-period values the differences stand for)."""
    mid = (x[1:] + x[:-1]) / 2
    return np.convolve(np.pad(mid, (len(w) // 2, len(w) // 2), mode="edge"), w[::-1], mode="valid")


def motion(log: LiftLog, speed_lsb: float) -> Motion:
    """The filtered motion; speeds that are whole encoder counts rounded to speed_lsb (the lift's step)
    are taken back to their counts first (countlattice.py: the uneven staircase biases the derivative)."""
    dt = float(np.median(np.diff(log.t)))
    half = max(2, int(round(benchdata.SG_WINDOW_S / dt)) // 2)
    w = weights(half)
    raw = countlattice.on_counts(log.speed, speed_lsb)
    speed = _mean(raw, w)
    slope = np.diff(raw) / dt
    accel = np.convolve(np.pad(slope, (half, half), mode="edge"), w[::-1], mode="valid")
    edge = np.zeros(len(log), dtype=bool)
    edge[:half], edge[-half:] = True, True
    scatter = float(np.sqrt(np.mean((raw - speed)[~edge] ** 2)))
    return Motion(speed=speed, accel=accel, current=_mean(log.current, w), scatter_mps=scatter, half=half, edge=edge)


def steady(flags: np.ndarray, half: int) -> np.ndarray:
    """Rows whose `flags` value (an integer class per row) is the same on every row within `half` of it."""
    n = len(flags)
    change = np.flatnonzero(np.diff(flags) != 0)  # a change between rows c and c + 1
    bad = np.zeros(n + 1, dtype=int)
    np.add.at(bad, np.clip(change + 1 - half, 0, n), 1)
    np.add.at(bad, np.clip(change + 1 + half, 0, n), -1)
    return np.cumsum(bad)[:n] == 0


def noise_floor(log: LiftLog) -> float:
    """The measured current's noise, A: sqrt(mean(diff^2) / 2) of consecutive valid rows where the
    setpoint's acceleration is zero on both (holding, cruising), as benchdata.noise_floor for the drive."""
    steady = (log.setpoint["accel_mps2"] == 0) & log.valid
    pairs = steady[1:] & steady[:-1]
    if pairs.sum() < 20:
        pairs = log.valid[1:] & log.valid[:-1]
    return float(np.sqrt(np.mean(np.diff(log.current)[pairs] ** 2) / 2))


def kinds(lt: Lift, log: LiftLog, m: Motion) -> np.ndarray:
    """Per row: 1..4 moving up or down beyond the blend band, the load driving the motor or not; 5 standing
    with a standing setpoint; 0 anything between (friction and efficiency switch between kinds)."""
    margin = 2 * m.scatter_mps
    force = lift.load_force(lt, log.setpoint["payload_kg"], m.speed, m.accel)
    driven = np.asarray(opposed(force, m.speed), dtype=int)
    moving = np.abs(m.speed) > lift.blend_width(lt) + margin
    standing = (log.setpoint["speed_mps"] == 0) & (log.setpoint["accel_mps2"] == 0) & (np.abs(m.speed) <= margin)
    return np.where(moving, 1 + 2 * (m.speed < 0) + driven, np.where(standing, 5, 0))


def settled(lt: Lift, log: LiftLog, m: Motion) -> np.ndarray:
    """Valid rows whose whole filter window is of one kind (a filter across a switch of kind mixes two
    laws), away from the log's ends: there the filtered current and motion obey the lift model exactly."""
    kind = kinds(lt, log, m)
    return (kind > 0) & steady(kind, m.half) & steady(log.valid.astype(int), m.half) & ~m.edge & log.valid
