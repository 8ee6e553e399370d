"""Bench plans and logs on disk: the plan CSV (SI units, one row per control period, a phase per row),
and the phase of a row of motion, which comparison reports by."""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from kinetab.generator import interface
from kinetab.generator.errors import UserError
from kinetab.generator.vehicle import Vehicle


def plan_columns(st: interface.Struct = interface.FF_IN) -> tuple[str, ...]:
    """Time, then the feed-forward inputs in SI units, in the firmware struct's order."""
    return ("t", *st.columns)


def file_columns(v: Vehicle) -> tuple[str, ...]:
    """The columns of this vehicle's plan files: its feed-forward struct's (body-frame inputs with
    firmware.inputs = 'body'); a Plan in memory always holds the wheel columns (PLAN_COLUMNS)."""
    return plan_columns(interface.ff_in(v))


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


def header_starts(path: Path, columns: tuple[str, ...]) -> bool:
    """True when the CSV file's first line begins with `columns` (how bench run, compare and fit know a
    lift plan or log from a drive one); False when it cannot be read."""
    try:
        with path.open(encoding="utf-8") as f:
            first = f.readline()
    except (OSError, UnicodeDecodeError):
        return False
    return [c.strip() for c in first.split(",")][: len(columns)] == list(columns)


def side_file(path: Path) -> Path:
    """PLAN.json beside PLAN.csv: which model the plan was made for."""
    return path.with_suffix(".json")


def side_text(v: Vehicle, *, rig: str | None = None) -> str:
    """The plan's side file: the model's name and fingerprint (bench run compares them) and the rig the
    plan was made for (bench run takes it as its default and refuses another)."""
    import json

    from kinetab.generator import synthesis

    doc = {"model_name": v.name, "fingerprint": f"0x{synthesis.fingerprint(v):08X}"}
    if rig is not None:
        doc["rig"] = rig
    return json.dumps(doc, indent=2) + "\n"


def plan_rig(path: Path) -> str | None:
    """The rig PLAN.json says the plan was made for (None: no side file, or none recorded)."""
    import json

    try:
        doc = json.loads(side_file(path).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError):
        return None
    rig = doc.get("rig") if isinstance(doc, dict) else None
    return rig if isinstance(rig, str) else None


def origin_problem(v: Vehicle, path: Path) -> tuple[str | None, str | None]:
    """(why the plan is another vehicle's, how it is older than the model) from PLAN.json; None where it
    is this vehicle's or no side file says."""
    import json

    from kinetab.generator import synthesis

    side = side_file(path)
    try:
        doc = json.loads(side.read_text(encoding="utf-8")) if side.is_file() else {}
    except (OSError, UnicodeDecodeError, json.JSONDecodeError):
        return None, f"{side}: not readable as the plan's side file; which model the plan is for is unknown"
    name, made = doc.get("model_name"), str(doc.get("fingerprint", ""))
    mine = f"0x{synthesis.fingerprint(v):08X}"
    if isinstance(name, str) and name != v.name:
        return f"{path}: a plan made for model '{name}' ({made or '?'}), not '{v.name}' ({mine})", None
    if made and made.upper() != mine.upper():
        return None, f"{path}: made from an earlier state of '{v.name}' ({made}; the model now gives {mine})"
    return None, None


def to_csv(plan: Plan, v: Vehicle | None = None) -> str:
    """The plan as CSV in the vehicle's plan columns (file_columns; wheel columns without a vehicle)."""
    st, columns = interface.FF_IN, plan.columns
    if v is not None and interface.ff_in(v).body:
        st = interface.ff_in(v)
        columns = {"t": plan.columns["t"], **interface.columns_si(v, st, plan.si())}
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow([*plan_columns(st), PHASE_COLUMN])
    for k in range(len(plan)):
        writer.writerow([f"{columns[c][k]:.9g}" for c in plan_columns(st)] + [plan.phase[k]])
    return buf.getvalue()


def _header_struct(path: Path, header: list[str], v: Vehicle | None) -> interface.Struct:
    """The struct whose columns the plan's header has: the vehicle's (one UserError line naming
    firmware.inputs when the plan was written for the other form)."""
    want = interface.FF_IN if v is None else interface.ff_in(v)
    if header[: len(plan_columns(want))] == list(plan_columns(want)):
        return want
    for other in (interface.FF_IN, interface.FF_IN_BODY):
        if other is not want and header[: len(plan_columns(other))] == list(plan_columns(other)):
            form, mine = ("body-frame", "wheel") if other.body else ("wheel", "body-frame")
            raise UserError(
                f"{path}:1: a plan of {form} inputs, but the model's firmware takes {mine} inputs "
                "(firmware.inputs): write the plan again with bench plan for this model"
            )
    raise UserError(f"{path}:1: expected the header {','.join(plan_columns(want))}[,phase]")


def read_plan(path: Path, v: Vehicle | None = None) -> Plan:
    """Read a plan CSV in the vehicle's plan columns (file_columns); a problem is one UserError naming the
    file, line and column."""
    rows = csv_rows(path, "plan")
    header = [c.strip() for c in rows[0]] if rows else []
    st = _header_struct(path, header, v)
    cols = plan_columns(st)
    if header not in (list(cols), [*cols, PHASE_COLUMN]):
        raise UserError(f"{path}:1: expected the header {','.join(cols)}[,{PHASE_COLUMN}], found {','.join(header)}")
    values, phases = [], []
    for line, row in enumerate(rows[1:], start=2):
        if row:
            values.append(numbers(path, line, row, cols, width=len(header)))
            phases.append(phase_label(path, line, row[len(cols)], PHASES) if len(header) > len(cols) else "")
    if not values:
        raise UserError(f"{path}: the plan has no rows")
    data = np.array(values)
    check_time(path, data[:, 0])
    return _wheel_plan(v, st, {c: data[:, k] for k, c in enumerate(cols)}, phases)


def csv_rows(path: Path, what: str) -> list[list[str]]:
    """The rows of a CSV file; one UserError line when it cannot be read."""
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise UserError(
            f"{path}: cannot read the {what} ({getattr(exc, 'strerror', None) or type(exc).__name__})"
        ) from None
    return list(csv.reader(io.StringIO(text)))


def numbers(path: Path, line: int, row: list[str], cols: tuple[str, ...], *, width: int) -> list[float]:
    """One plan row's values: as many fields as the header, each a finite number (else file:line, column)."""
    if len(row) != width:
        raise UserError(f"{path}:{line}: expected {width} values as the header says, found {len(row)}")
    out = []
    for col, text in zip(cols, row):
        try:
            x = float(text)
        except ValueError:
            x = math.nan
        if not math.isfinite(x):
            raise UserError(f"{path}:{line}: {col}: expected a finite number, found {text.strip()!r}")
        out.append(x)
    return out


def phase_label(path: Path, line: int, text: str, known: tuple[str, ...]) -> str:
    """A row's phase label: one of `known`, or empty."""
    phase = text.strip()
    if phase and phase not in known:
        raise UserError(f"{path}:{line}: {PHASE_COLUMN}: unknown phase {phase!r} (one of {', '.join(known)}, or empty)")
    return phase


def _wheel_plan(v: Vehicle | None, st: interface.Struct, columns: dict[str, np.ndarray], phases: list[str]) -> Plan:
    """A plan in memory (wheel columns) from the columns of its file."""
    if not st.body:
        return Plan(columns, phases)
    assert v is not None, "a body-frame plan is read only for its vehicle"
    si = interface.to_wheels(v, {a: columns[c] for c, a in st.si_names().items()})
    return Plan({"t": columns["t"], **{c: si[a] for c, a in SI_NAME.items()}}, phases)


def check_time(path: Path, t: np.ndarray) -> None:
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
