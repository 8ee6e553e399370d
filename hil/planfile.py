"""Bench plans and logs on disk: the plan CSV (SI units, one row per control period, a phase per row),
and the phase of a row of motion, which comparison reports by."""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from kinetab.generator import interface
from kinetab.generator.errors import UserError


def plan_columns(st: interface.Struct = interface.FF_IN) -> tuple[str, ...]:
    """Time, then the feed-forward inputs in SI units, in the firmware struct's order."""
    return ("t", *st.columns)


PLAN_COLUMNS = plan_columns()
PHASE_COLUMN = "phase"
SI_NAME = interface.FF_IN.si_names()
"""Plan column -> the OperatingPoint attribute (and interface SI key) it holds."""
PHASES = ("deadband", "accelerating", "cruising", "decelerating", "turning", "spin")


@dataclass(frozen=True)
class Plan:
    """A test trajectory: SI columns keyed as PLAN_COLUMNS, and a phase name per row."""

    columns: dict[str, np.ndarray]
    phase: list[str]

    def __len__(self) -> int:
        return len(self.phase)

    def si(self) -> dict[str, np.ndarray]:
        """The setpoints keyed by OperatingPoint attribute (for interface.to_steps and dynamics)."""
        return {SI_NAME[c]: self.columns[c] for c in PLAN_COLUMNS[1:]}


def phase_of(speed: np.ndarray, accel: np.ndarray, deadband_mps: float) -> list[str]:
    """The phase of each row from rim speeds and accelerations (n, 2): near standstill (within twice the
    deadband on both wheels), spin (opposite wheel directions), turning (speeds more than 5 % apart), else
    by the sign of acceleration against speed (below 1 mm/s^2 is cruising)."""
    out = []
    for (ur, ul), (ar, al) in zip(speed, accel):
        v, a = (ur + ul) / 2, (ar + al) / 2
        if max(abs(ur), abs(ul)) <= 2 * deadband_mps:
            out.append("deadband")
        elif ur * ul < 0:
            out.append("spin")
        elif abs(ur - ul) > 0.05 * max(abs(ur), abs(ul)):
            out.append("turning")
        elif abs(a) < 1e-3:
            out.append("cruising")
        else:
            out.append("accelerating" if a * v > 0 else "decelerating")
    return out


def to_csv(plan: Plan) -> str:
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow([*PLAN_COLUMNS, PHASE_COLUMN])
    for k in range(len(plan)):
        writer.writerow([f"{plan.columns[c][k]:.9g}" for c in PLAN_COLUMNS] + [plan.phase[k]])
    return buf.getvalue()


def read_plan(path: Path) -> Plan:
    """Read a plan CSV; a problem is one UserError naming the file, line and column."""
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise UserError(
            f"{path}: cannot read the plan ({getattr(exc, 'strerror', None) or type(exc).__name__})"
        ) from None
    rows = list(csv.reader(io.StringIO(text)))
    if not rows or [c.strip() for c in rows[0][: len(PLAN_COLUMNS)]] != list(PLAN_COLUMNS):
        raise UserError(f"{path}:1: expected the header {','.join(PLAN_COLUMNS)}[,phase]")
    header = [c.strip() for c in rows[0]]
    has_phase = PHASE_COLUMN in header
    values, phases = [], []
    for line, row in enumerate(rows[1:], start=2):
        if not row:
            continue
        try:
            values.append([float(row[k]) for k in range(len(PLAN_COLUMNS))])
        except (ValueError, IndexError):
            raise UserError(f"{path}:{line}: expected {len(PLAN_COLUMNS)} numbers") from None
        phases.append(row[header.index(PHASE_COLUMN)] if has_phase and len(row) > len(PLAN_COLUMNS) else "")
    if not values:
        raise UserError(f"{path}: the plan has no rows")
    data = np.array(values)
    if not np.all(np.isfinite(data)):
        raise UserError(f"{path}: every value must be a finite number")
    _check_time(path, data[:, 0])
    return Plan({c: data[:, k] for k, c in enumerate(PLAN_COLUMNS)}, phases)


def _check_time(path: Path, t: np.ndarray) -> None:
    """One row per control period: t rises by the same step on every row (to its 9 printed digits)."""
    if len(t) < 2:
        return
    step = np.diff(t)
    bad = np.flatnonzero(np.abs(step - step[0]) > 1e-6 * step[0] + 1e-8 * np.abs(t[1:]))
    if step[0] <= 0 or len(bad):
        line = 3 + (int(bad[0]) if len(bad) else 0)
        raise UserError(f"{path}:{line}: t must rise by one control period per row ({step[0]:.9g} s at line 3)")


def period_s(plan: Plan) -> float | None:
    """The plan's control period (its time step), None for a one-row plan."""
    t = plan.columns[PLAN_COLUMNS[0]]
    return float(t[1] - t[0]) if len(t) > 1 else None
