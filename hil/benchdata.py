"""A bench log read back for comparison and fitting: the columns as arrays, the rig, accelerations
from the measured speeds, and the model's predictions of the current."""

from __future__ import annotations

import csv
import dataclasses
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from kinetab.generator import dynamics, interface
from kinetab.generator.errors import UserError
from kinetab.generator.vehicle import Vehicle

from . import countlattice, messages
from .benchlog import log_columns

SG_WINDOW_S = 0.1  # Savitzky-Golay window for accelerations from measured speeds
TIGHT_TRACKING = 0.005  # RMS speed error below this fraction of speed_max counts as tight tracking


@dataclass(frozen=True)
class BenchLog:
    """One log: SI arrays, the phase per row, which rows carry a valid measurement, the rig."""

    path: Path
    rig: str
    t: np.ndarray
    phase: np.ndarray
    setpoint: dict[str, np.ndarray]  # OperatingPoint attributes
    ff: np.ndarray  # (n, 2) A, the controller's feed-forward
    current: np.ndarray  # (n, 2) A, measured
    speed: np.ndarray  # (n, 2) m/s, measured
    valid: np.ndarray  # (n,) bool
    meta: dict[str, Any] = field(default_factory=dict)  # LOG.json, when there is one

    def __len__(self) -> int:
        return len(self.t)


def _log_struct(path: Path, header: tuple[str, ...], v: Vehicle | None) -> interface.Struct:
    """The feed-forward struct whose setpoint columns the log has: the vehicle's (wheel inputs without
    one); one UserError line naming firmware.inputs when the log is of the other form."""
    want = interface.FF_IN if v is None else interface.ff_in(v)
    if header == log_columns(want):
        return want
    other = interface.FF_IN_BODY if not want.body else interface.FF_IN
    if header == log_columns(other):
        form, mine = ("body-frame", "wheel") if other.body else ("wheel", "body-frame")
        meta = side_file(path)
        who = f" (recorded with model '{meta['model_name']}')" if isinstance(meta.get("model_name"), str) else ""
        model = f"'{v.name}'" if v is not None else "the model"
        raise UserError(f"{path}:1: a log of {form} setpoints{who}, but {model} takes {mine} inputs (firmware.inputs)")
    raise UserError(f"{path}:1: expected a bench log with the header {','.join(log_columns(want))}")


def read_log(path: Path, rig: str | None = None, vehicle: Vehicle | None = None) -> BenchLog:
    """Read LOG.csv (and the rig from LOG.json, unless given); one UserError line when it cannot be.
    Setpoints in the vehicle's input form (body-frame ones turned into wheel values). numpy's C parser
    reads the columns (a Python loop over the cells took ~0.5 s per minute of log)."""
    st = _log_struct(path, tuple(csv_header(path)), vehicle)
    columns = log_columns(st)
    num, phase, cut = read_table(path, columns)
    names = [c for c in columns if c != "phase"]
    get = {c: num[:, names.index(c)] for c in names}
    meta = side_file(path) | ({CUT: True} if cut else {})
    rows_as_written(path, meta, len(num) + cut)
    recorded = str(meta.get("rig", "on-floor"))
    setpoint = {a: get[c] for c, a in st.si_names().items()}
    if st.body:
        assert vehicle is not None
        setpoint = interface.to_wheels(vehicle, setpoint)
    pair = lambda a, b: np.column_stack([get[a], get[b]])  # noqa: E731
    return BenchLog(
        path=path,
        rig=rig or recorded,
        t=get["t"],
        phase=phase,
        setpoint=setpoint,
        ff=pair("ff_current_right", "ff_current_left"),
        current=pair("current_right", "current_left"),
        speed=pair("measured_speed_right", "measured_speed_left"),
        valid=(get["status"].astype(int) & messages.STATUS_MEASURED) != 0,
        meta=meta,
    )


CUT = "last_line_cut"
"""A key read_table adds to a log's side-file dict when it left out a last line cut mid-write."""


def read_table(path: Path, columns: tuple[str, ...]) -> tuple[np.ndarray, np.ndarray, bool]:
    """A log's rows: the numbers of every column but phase (n, columns - 1), the phases, and whether a
    last line without its line end (the run stopped mid-write: power lost, the process killed) was left
    out; any other bad line is one UserError naming it. numpy's C parser reads the columns (a Python
    loop over the cells took ~0.5 s per minute of log)."""
    with path.open("rb") as fh:
        size = fh.seek(0, 2)
        if size:
            fh.seek(-1, 2)
        cut = size > 0 and fh.read(1) != b"\n"
    source: Any = path
    if cut:
        lines = path.read_text(encoding="utf-8", errors="replace").splitlines()
        cut = len(lines) > 2  # a header and one partial row: nothing to keep
        source = lines[1:-1] if cut else lines[1:]
    numeric = [k for k, name in enumerate(columns) if name != "phase"]
    skip = 0 if cut else 1
    try:
        num = np.loadtxt(source, delimiter=",", skiprows=skip, usecols=numeric, ndmin=2, encoding="utf-8")
        phase = np.loadtxt(
            source, delimiter=",", skiprows=skip, usecols=[columns.index("phase")], dtype=str, ndmin=1, encoding="utf-8"
        )
    except (ValueError, IndexError, UnicodeDecodeError):
        raise UserError(first_bad_row(path, columns)) from None
    if len(num) < 50:
        raise UserError(f"{path}: expected at least 50 rows, found {len(num)}")
    return num, phase, bool(cut)


def csv_header(path: Path) -> list[str]:
    """The first line of a log, as cells; one UserError line when the file cannot be read."""
    try:
        with path.open(encoding="utf-8") as fh:
            return [c.strip() for c in next(csv.reader([fh.readline()]), [])]
    except (OSError, UnicodeDecodeError) as exc:
        raise UserError(
            f"{path}: cannot read the log ({getattr(exc, 'strerror', None) or type(exc).__name__})"
        ) from None


def rows_as_written(path: Path, meta: dict[str, Any], rows: int) -> None:
    """The log holds as many rows as its side file says the run wrote (a trial's log cut to 8000 of
    20000 rows was used without a word)."""
    written = meta.get("log_rows")
    if isinstance(written, int) and not isinstance(written, bool) and written != rows:
        raise UserError(
            f"{path}: holds {rows} rows, but {path.with_suffix('.json').name} says the run wrote {written}: "
            "the log was cut or edited, or the side file is another run's"
        )


def first_bad_row(path: Path, columns: tuple[str, ...]) -> str:
    """The first line of the log that is not a row of numbers (phase aside), as one error line; read only
    once numpy's parser has refused the file."""
    with path.open(encoding="utf-8", errors="replace") as fh:
        for number, line in enumerate(fh, 1):
            if number == 1:
                continue
            cells = line.rstrip("\r\n").split(",")
            if len(cells) != len(columns):
                return f"{path}:{number}: expected {len(columns)} columns, found {len(cells)} (a cut or edited line?)"
            for name, cell in zip(columns, cells):
                if name == "phase":
                    continue
                try:
                    float(cell)
                except ValueError:
                    return f"{path}:{number}: column {name}: expected a number, found {cell.strip()[:20]!r}"
    return f"{path}: every column but phase must be a number"


def side_file(path: Path) -> dict[str, Any]:
    """LOG.json beside LOG.csv ({} when there is none); one UserError line when it is not JSON."""
    side = path.with_suffix(".json")
    if not side.exists():
        return {}
    try:
        doc = json.loads(side.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise UserError(f"{side}: cannot read the run's side file ({type(exc).__name__})") from None
    if not isinstance(doc, dict):
        raise UserError(f"{side}: expected a JSON object (the run's side file)")
    return doc


def origin_problems(v: Vehicle, log: Any, fingerprint: int) -> tuple[str | None, str | None]:
    """(why the log (a BenchLog or a lift log: its path and meta) is not from this model, how the run fell
    short) from LOG.json; None where all is well.
    The first is an error unless accepted on purpose; the second a warning (the rows recorded are used)."""
    meta, other = log.meta, None
    cut = "; its last line was cut mid-write and is left out" if meta.get(CUT) else ""
    meta = {k: x for k, x in meta.items() if k != CUT}
    if not meta:
        return (
            None,
            f"{log.path}: no {log.path.with_suffix('.json').name} beside it: which model recorded it is unknown{cut}",
        )
    name, recorded = meta.get("model_name"), str(meta.get("fingerprint", ""))
    mine = f"0x{fingerprint:08X}"
    if (name is not None and name != v.name) or (name is None and recorded and recorded.upper() != mine.upper()):
        other = (
            f"{log.path}: recorded with model '{name or meta.get('model', '?')}' (fingerprint {recorded or '?'}), "
            f"not '{v.name}' ({mine})"
        )
    elif recorded and recorded.upper() != mine.upper():
        other = (
            f"{log.path}: recorded with another state of model '{v.name}' (fingerprint {recorded}; the model "
            f"now gives {mine}): a value in the model changed since the run"
        )
    rows, samples = meta.get("rows"), meta.get("samples")
    ended = str(meta.get("ended", meta.get("exit_reason", "")))
    short = None
    if ended == "running":
        short = f"{log.path}: the run never finished (LOG.json still says running: killed, or the power lost)"
        short += f"; using the {len(log)} rows recorded"
    elif isinstance(rows, int) and isinstance(samples, int) and (samples < rows or (ended and ended != "completed")):
        why = ended or "no end recorded"
        short = f"{log.path}: incomplete run: {samples} of {rows} samples ({why}); using those recorded"
    if cut:
        short = (short or f"{log.path}: ") + cut.removeprefix("; " if short is None else "")
    return other, short


def accelerations(v: Vehicle, log: BenchLog) -> tuple[np.ndarray, str]:
    """Rim accelerations (n, 2) for the measured motion, and how they were obtained: the setpoint's when
    tracking was tight (RMS speed error below 0.5 % of speed_max), else a Savitzky-Golay derivative of
    the measured speeds (quadratic, 0.1 s window)."""
    asked = dynamics.OperatingPoint(**log.setpoint)
    err = float(np.sqrt(np.mean((log.speed - np.column_stack([asked.speed_right, asked.speed_left])) ** 2)))
    if err < TIGHT_TRACKING * v.envelope.speed_max_mps:
        acc = np.column_stack([asked.accel_right, asked.accel_left])
        return acc, f"setpoint accelerations (tracking was tight: RMS speed error {err * 1000:.2f} mm/s)"
    acc = derivative(log, v.firmware.speed_lsb_mps)
    window, _ = _window(log)
    return acc, (
        f"Savitzky-Golay derivative of the measured speeds ({window} samples, quadratic; "
        f"RMS speed error {err * 1000:.2f} mm/s)"
    )


def derivative(log: BenchLog, speed_lsb: float, window_s: float = SG_WINDOW_S) -> np.ndarray:
    """Rim accelerations (n, 2) as the Savitzky-Golay derivative of the measured speeds (quadratic, over
    window_s), taken back to whole encoder counts first where they are a rounded count lattice
    (countlattice.py)."""
    from scipy.signal import savgol_filter  # here: scipy.signal takes ~0.5 s to load

    window, dt = _window(log, window_s)
    speed = countlattice.on_counts(log.speed, speed_lsb)
    return np.asarray(savgol_filter(speed, window, 2, deriv=1, delta=dt, axis=0))


def _window(log: BenchLog, window_s: float = SG_WINDOW_S) -> tuple[int, float]:
    """The Savitzky-Golay window over window_s in samples (odd, at least 5, at most the log: a short log
    of a fine period would otherwise be shorter than its window) and the sample period, s."""
    dt = float(np.median(np.diff(log.t)))
    longest = len(log) if len(log) % 2 else len(log) - 1
    return max(5, min(int(round(window_s / dt)) | 1, longest)), dt


def window_samples(log: BenchLog, window_s: float) -> int:
    """Samples of the Savitzky-Golay window over window_s for this log (_window)."""
    return _window(log, window_s)[0]


def smoothed_speed(log: BenchLog, speed_lsb: float) -> np.ndarray:
    """Measured speeds smoothed by the same Savitzky-Golay filter (encoder quantisation averaged out), on
    whole encoder counts as `derivative`."""
    from scipy.signal import savgol_filter

    window, _ = _window(log)
    return np.asarray(savgol_filter(countlattice.on_counts(log.speed, speed_lsb), window, 2, axis=0))


def operating_point(log: BenchLog, *, speed: np.ndarray, accel: np.ndarray) -> dynamics.OperatingPoint:
    """The setpoints' slope and payload with the measured speeds and their accelerations."""
    asked = dynamics.OperatingPoint(**log.setpoint)
    return dataclasses.replace(
        asked, speed_right=speed[:, 0], speed_left=speed[:, 1], accel_right=accel[:, 0], accel_left=accel[:, 1]
    )


def predicted_current(v: Vehicle, op: dynamics.OperatingPoint, rig: str) -> np.ndarray:
    """The float model's motor currents (n, 2), A, for the rig."""
    return np.asarray(dynamics.rig_currents(v, op, rig))


def noise_floor(log: BenchLog) -> float:
    """The measured current's noise, A: sqrt(mean(diff^2) / 2) of consecutive samples while cruising
    (both neighbours cruising), where the true current barely changes from one period to the next; for
    white noise this is its standard deviation (with too few such rows: over all rows)."""
    steady = (log.phase == "cruising") & log.valid
    pairs = steady[1:] & steady[:-1]
    if pairs.sum() < 20:
        pairs = log.valid[1:] & log.valid[:-1]
    d = np.diff(log.current, axis=0)[pairs]
    return float(np.sqrt(np.mean(d**2) / 2))
