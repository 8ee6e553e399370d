"""The current step between neighbouring firmware inputs: how much the generated feed-forward's command
changes when one input moves by one step, against what the model itself changes there with the
efficiency held at its motoring value (so the efficiency's own change, a jump with a switch or a slope
across the blend band, counts against the margin). Sampled, not proven; verify gates it."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from . import bodyframe, dynamics, emulate, interface
from .accuracy import envelope_points, inside_envelope, operating_point
from .synthesis import Firmware

NEIGHBOUR_POINTS = 2000
"""Random points (besides corners and deadband cases) over which neighbour_steps looks."""
STEP_BUDGETS = 4
"""Default margin, in current budgets: two neighbouring outputs may each be off the model by the
budget, which leaves two budgets for the blend band's own slope."""
STEP_FLOOR = 0.01
"""...but never below this fraction of drive.current_limit: a step that small is lost in a PWM drive's
current ripple (a judgement from memory of typical drives, not a standard), and a tight table budget
should not force an absurdly wide blend band."""


@dataclass(frozen=True, kw_only=True)
class NeighbourStep:
    """The largest change of the generated feed-forward current (A) when one input moves from `at` to
    `at + 1` firmware steps, the others held; and the largest amount by which such a change exceeds the
    model's own change there with the motoring efficiency (`excess`, A, at `excess_at`)."""

    amps: float
    at: int
    excess: float = 0.0
    excess_at: int = 0


def _motoring(fw: Firmware) -> dynamics.Vehicle:
    """The vehicle with the efficiency held at its motoring value (back-driving factor 1 everywhere)."""
    v = fw.vehicle
    return dataclasses.replace(v, drive=dataclasses.replace(v.drive, backdrive_efficiency=1 / v.drive.efficiency))


@dataclass(frozen=True)
class _Evaluated:
    """Rows of firmware inputs (steps) with the firmware's currents (steps) and the motoring model's (A)."""

    rows: np.ndarray
    firmware: np.ndarray
    model: np.ndarray


def _batch(fw: Firmware, blocks: list[np.ndarray]) -> list[_Evaluated]:
    """Each block of rows evaluated, all in one call of the emulator and of the model (their cost is
    mostly per call, so one call for every input's rows saves most of it)."""
    rows = np.concatenate(blocks)
    distinct, back = _distinct(rows)
    st = interface.ff_in(fw.vehicle)
    fields = interface.rows_to_fields(st, distinct)
    current = emulate.run(fw.design.feedforward, fw.tables, fields)["current"][back]
    model = dynamics.wheel_currents(_motoring(fw), operating_point(fw, fields))[back]
    cuts = np.cumsum([0, *map(len, blocks)])
    return [_Evaluated(*(x[lo:hi] for x in (rows, current, model))) for lo, hi in zip(cuts[:-1], cuts[1:])]


_HASH_FACTOR = np.uint64(0x9E3779B97F4A7C15)  # odd: a row's columns mixed into one 64-bit key


def _distinct(rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The distinct rows and where each row's copy is among them (rows == distinct[back]), so each is
    evaluated once: the rows are independent, and the second batch repeats three in four on the demo.
    Integer rows found by a 64-bit key, checked row by row; two rows alike by key: all rows, none merged."""
    if rows.dtype.kind != "i" or not len(rows):
        return rows, np.arange(len(rows))
    powers = _HASH_FACTOR ** np.arange(rows.shape[1], dtype=np.uint64)
    key = rows.astype(np.uint64) @ powers  # sum of column j times factor^j, modulo 2^64 (wraps, as meant)
    _, back = np.unique(key, return_inverse=True)
    first = np.empty(back.max() + 1, dtype=np.intp)
    first[back] = np.arange(len(rows))  # a row of each key (which one does not matter once checked)
    distinct = rows[first]
    if not np.array_equal(distinct[back], rows):
        return rows, np.arange(len(rows))
    return distinct, back


def _moved(rows: np.ndarray, column: int) -> np.ndarray:
    """The rows with one column moved up one step."""
    out = rows.copy()
    out[:, column] += 1
    return out


def _jumps(fw: Firmware, here: _Evaluated, up: _Evaluated) -> tuple[np.ndarray, np.ndarray]:
    """Per row and wheel, the firmware's current change (A) from `here` to `up` (the rows with one input
    moved up one step), and that change less the model's own (motoring efficiency); zero where the
    moved row leaves the envelope."""
    fw_jump = np.abs(up.firmware - here.firmware) * fw.vehicle.firmware.current_lsb_a
    model_jump = np.abs(up.model - here.model)
    out = ~inside_envelope(fw.vehicle, fw.design.limits, up.rows)
    fw_jump[out], model_jump[out] = 0.0, 0.0
    return fw_jump.max(axis=1), (fw_jump - model_jump).max(axis=1)


def _edges(fw: Firmware) -> np.ndarray:
    """Every combination of each input's edges and zero, inside the envelope."""
    lo, hi = interface.column_edges(fw.design.limits, interface.ff_in(fw.vehicle))
    # sorted sets, not np.unique: its first plain call imports numpy.ma (8 ms of a build)
    grid = np.stack(np.meshgrid(*[sorted({a, 0, b}) for a, b in zip(lo, hi)], indexing="ij"), -1)
    edges = grid.reshape(-1, len(lo))
    return edges[inside_envelope(fw.vehicle, fw.design.limits, edges)]


SPEED_INPUTS = {"speed": "", "forward_speed": "r_along", "yaw_rate": "r_turn"}
"""The inputs that move a wheel's speed, and for body-frame ones the ratio of the conversion (wheel
steps per input step, bodyframe.Conversion) that their places are divided by."""


def _speed_places(fw: Firmware, name: str) -> list[int]:
    """Where speed steps matter most: around zero, the deadband edges, the friction tables' split (the
    Stribeck edge when they split there), the blend band (middle and end); for a body-frame input the
    nearest of its own steps."""
    lsb = fw.vehicle.firmware.speed_lsb_mps
    band = int(dynamics.blend_width(fw.vehicle) / lsb)
    split = fw.tables["friction"].spec.pieces[0].x1
    places = {0, 1, 2, fw.design.limits.deadband, fw.design.limits.deadband + 1, split, split + 1}
    places |= {band // 2, band, band + 1}
    ratio = getattr(bodyframe.mix(fw.vehicle, "speed"), SPEED_INPUTS[name]) if SPEED_INPUTS[name] else 1.0
    return sorted({x for p in places for x in (round(p / ratio), -round(p / ratio) - 1)})


def neighbour_steps(fw: Firmware) -> dict[str, NeighbourStep]:
    """Per input, the largest current step of the integer program between neighbouring inputs and its
    largest excess over the model's own step, found over the corners, the deadband cases,
    NEIGHBOUR_POINTS random points inside the envelope and every combination of each input's edges and
    zero; then again over that combination at the place found, and for speed at zero, the deadband
    edges and across the blend band. Sampled, not proven."""
    edges, st = _edges(fw), interface.ff_in(fw.vehicle)
    base = np.concatenate([interface.fields_to_rows(st, envelope_points(fw, NEIGHBOUR_POINTS, 11)), edges])
    columns = [(m, st.columns.index(c)) for m in st.members for c in m.columns]
    here, *firsts = _batch(fw, [base, *[_moved(base, j) for _, j in columns]])
    extras, at_base = [], [_jumps(fw, here, up) for up in firsts]
    for (m, j), (jump, excess) in zip(columns, at_base):
        places = {int(base[int(np.argmax(jump)), j]), int(base[int(np.argmax(excess)), j])}
        places |= set(_speed_places(fw, m.name)) if m.name in SPEED_INPUTS else set()
        extras.append(np.concatenate([np.where(np.arange(len(st.columns)) == j, p, edges) for p in places]))
    done = _batch(fw, [*extras, *[_moved(x, j) for x, (_, j) in zip(extras, columns)]])
    at_extras, seconds = done[: len(extras)], done[len(extras) :]
    out: dict[str, NeighbourStep] = {}
    for (m, j), (jump, excess), ex, second in zip(columns, at_base, at_extras, seconds):
        rows = np.concatenate([base, ex.rows])
        more_jump, more_excess = _jumps(fw, ex, second)  # rows apart: the base's were found above
        jump, excess = np.concatenate([jump, more_jump]), np.concatenate([excess, more_excess])
        a, e = int(np.argmax(jump)), int(np.argmax(excess))
        best = out.get(m.name, NeighbourStep(amps=0.0, at=0))
        out[m.name] = NeighbourStep(
            amps=max(best.amps, float(jump[a])),
            at=int(rows[a, j]) if jump[a] > best.amps else best.at,
            excess=max(best.excess, float(excess[e])),
            excess_at=int(rows[e, j]) if excess[e] > best.excess else best.excess_at,
        )
    return out


def margin_a(fw: Firmware) -> tuple[float, str]:
    """How far the firmware's step may exceed the model's own (motoring efficiency), A, and the source:
    firmware.current_step_margin, else the larger of STEP_BUDGETS x current_budget and STEP_FLOOR x
    drive.current_limit."""
    f, limit = fw.vehicle.firmware, fw.vehicle.drive.current_limit_a
    if f.current_step_margin_a is not None:
        return f.current_step_margin_a, "firmware.current_step_margin"
    if STEP_FLOOR * limit > STEP_BUDGETS * f.current_budget_a:
        return STEP_FLOOR * limit, f"{STEP_FLOOR:.0%} of drive.current_limit, above {STEP_BUDGETS} x current_budget"
    return STEP_BUDGETS * f.current_budget_a, f"{STEP_BUDGETS} x firmware.current_budget"


def largest(steps: dict[str, NeighbourStep], *, by: str = "amps") -> tuple[str, NeighbourStep]:
    """The input whose neighbouring step is largest (`by`: "amps" or "excess"), and that step."""
    name = max(steps, key=lambda n: getattr(steps[n], by))
    return name, steps[name]
