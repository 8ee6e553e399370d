"""The bench log: one CSV row per setpoint as its sample arrives (flushed, so an interrupted run keeps
everything it received) and a JSON side file with the run's metadata."""

from __future__ import annotations

import csv
from pathlib import Path
from typing import IO, Any

import numpy as np
from kinetab.generator import interface
from kinetab.generator.errors import UserError
from kinetab.generator.vehicle import Vehicle

from . import messages
from .planfile import Plan, plan_columns


def log_columns(st: interface.Struct = interface.FF_IN) -> tuple[str, ...]:
    """A log's columns: time, sequence, phase, the setpoint in the struct's columns, the feed-forward,
    the measurements and the bits."""
    return (
        "t",
        "seq",
        "phase",
        *plan_columns(st)[1:],
        "ff_current_right",
        "ff_current_left",
        "current_right",
        "current_left",
        "measured_speed_right",
        "measured_speed_left",
        "status",
        "clamped",
    )


LOG_COLUMNS = log_columns()
"""SI units: s, m/s, m/s^2, rad, kg, A (rad/s, rad/s^2 for body-frame setpoints, log_columns(FF_IN_BODY));
the setpoint columns hold what the controller received (firmware steps times their step), status and
clamped are the sample's bits."""


class LogWriter:
    """Appends rows to LOG.csv as samples arrive; every row is flushed at once."""

    def __init__(self, path: Path, vehicle: Vehicle, plan: Plan, steps: np.ndarray) -> None:
        self.path, self.vehicle, self.plan, self.steps = path, vehicle, plan, steps
        try:
            self._file: IO[str] = path.open("w", encoding="utf-8", newline="")
        except OSError as exc:
            raise UserError(f"{path}: cannot write the log ({exc.strerror})") from None
        self._csv = csv.writer(self._file, lineterminator="\n")
        self._csv.writerow(log_columns(interface.ff_in(vehicle)))
        self._file.flush()
        self.rows = 0

    def add(self, index: int, sample: messages.Sample) -> None:
        """The row of plan row `index` with its sample (SI units)."""
        f = self.vehicle.firmware
        st = interface.ff_in(self.vehicle)
        fields = interface.rows_to_fields(st, self.steps[index : index + 1])
        si = interface.struct_si(self.vehicle, st, fields)
        setpoint = [float(np.asarray(si[a]).ravel()[0]) for a in st.si_names().values()]
        amps = [x * f.current_lsb_a for x in sample.ff]
        current = [x * f.current_lsb_a for x in sample.measured[:2]]
        speed = [x * f.speed_lsb_mps for x in sample.measured[2:4]]
        row: list[Any] = [f"{self.plan.columns['t'][index]:.6f}", sample.seq, self.plan.phase[index]]
        row += [f"{x:.9g}" for x in setpoint + amps + current + speed] + [sample.status, sample.clamped]
        self._csv.writerow(row)
        self._file.flush()
        self.rows += 1

    def close(self) -> None:
        self._file.close()
