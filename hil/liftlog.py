"""The lift's bench log: one CSV row per lift setpoint as its sample arrives (flushed), with the same JSON
side file as the drive's log (hil/runner.py), and the log read back for compare and fit."""

from __future__ import annotations

import csv
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Any

import numpy as np
from kinetab.generator import interface
from kinetab.generator.errors import UserError
from kinetab.generator.vehicle import Vehicle

from . import benchdata, liftplan, messages

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
    try:
        with path.open(encoding="utf-8") as f:
            first = f.readline()
    except (OSError, UnicodeDecodeError):
        return False
    return [c.strip() for c in first.split(",")][:4] == list(COLUMNS[:4])


def read_log(path: Path) -> LiftLog:
    """Read a lift LOG.csv (and LOG.json); one UserError line naming the file, line and column."""
    rows = benchdata.csv_header(path)
    if tuple(rows) != COLUMNS:
        raise UserError(f"{path}:1: expected a lift log with the header {','.join(COLUMNS)}")
    numeric = [k for k, name in enumerate(COLUMNS) if name != "phase"]
    try:
        num = np.loadtxt(path, delimiter=",", skiprows=1, usecols=numeric, ndmin=2, encoding="utf-8")
        phase = np.loadtxt(path, delimiter=",", skiprows=1, usecols=[2], dtype=str, ndmin=1, encoding="utf-8")
    except (ValueError, IndexError, UnicodeDecodeError):
        raise UserError(benchdata.first_bad_row(path, COLUMNS)) from None
    if len(num) < 50:
        raise UserError(f"{path}: expected at least 50 rows, found {len(num)}")
    names = [c for c in COLUMNS if c != "phase"]
    get = {c: num[:, names.index(c)] for c in names}
    meta = benchdata.side_file(path)
    benchdata.rows_as_written(path, meta, len(num))
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
