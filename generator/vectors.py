"""Golden vectors: firmware inputs (random, corners, deadband, clamping) with the emulator's outputs.

The CSV is for the firmware's own unit tests: one row per call of <name>_feedforward; its columns
are the interface's struct columns in order.
"""

from __future__ import annotations

import io
import itertools
from typing import Any

import numpy as np

from . import bodyframe, emulate, interface, region
from .interface import FF_IN, FF_OUT
from .vehicle import Vehicle


def _corners(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Every combination of edges: -max, 0, max for per-wheel inputs; both edges for the others."""
    choices = []
    pairs = [m.count == 2 for m in FF_IN.members for _ in m.columns]
    for k, pair in enumerate(pairs):
        choices.append((lo[k], 0, hi[k]) if pair else (lo[k], hi[k]))
    return np.array(list(itertools.product(*choices)))


def _region_rows(lim: Any, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """The speed and acceleration regions' vertices (whole steps: the diagonals are even), combined, with
    both edges of the other inputs; none when both regions are boxes (their corners are in _corners)."""
    if lim.speed_pair.is_box and lim.accel_pair.is_box:
        return np.zeros((0, len(lo)), dtype=np.int64)
    pairs = [FF_IN.columns.index(c) for name in ("speed", "accel") for c in FF_IN.member(name).columns]
    rest = [k for k in range(len(lo)) if k not in pairs]
    vertex_sets = [region.vertices(p).astype(np.int64) for p in (lim.speed_pair, lim.accel_pair)]
    rows = []
    for sp, ac in itertools.product(*vertex_sets):
        for other in itertools.product(*[(lo[k], hi[k]) for k in rest]):
            row = np.zeros(len(lo), dtype=np.int64)
            row[pairs], row[rest] = [*sp, *ac], other
            rows.append(row)
    return np.array(rows, dtype=np.int64)


def _special_rows(lim: Any, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Deadband edges on both speeds (at half payload), and rows beyond the envelope and int32."""
    cols, db = FF_IN.columns, lim.deadband
    speed = [cols.index(c) for c in FF_IN.member("speed").columns]
    pay = cols.index("payload")
    edge = np.array([-db - 1, -db, -db + 1, -1, 0, 1, db - 1, db, db + 1])
    dead = np.zeros((len(edge) ** 2, len(cols)), dtype=np.int64)
    dead[:, speed[0]], dead[:, speed[1]] = np.repeat(edge, len(edge)), np.tile(edge, len(edge))
    dead[:, pay] = hi[pay] // 2
    big = np.iinfo(np.int32)
    alternate = np.arange(len(cols)) % 2 == 0
    outside = np.stack(
        [
            np.where(alternate, hi + 1, lo - 1),
            np.where(alternate, big.max, big.min),
            np.where(alternate, big.min, big.max),
            np.zeros(len(cols), dtype=np.int64),
        ]
    )
    outside[3, speed] = 2 * hi[speed]
    outside[3, pay] = -1
    return np.concatenate([dead, outside])


def _edge_rows(hi: np.ndarray, edges: tuple[int, ...]) -> np.ndarray:
    """Each wheel one step before, at and after each speed edge (either sign), the other wheel at the
    opposite speed, at rest or alike, at half payload: where a speed table changes piece."""
    cols = FF_IN.columns
    speed = [cols.index(c) for c in FF_IN.member("speed").columns]
    values = sorted({s * (e + d) for e in edges for d in (-1, 0, 1) for s in (-1, 1)})  # not np.unique: steps._edges
    pairs = [(x, y) for x in values for y in (-x, 0, x)]
    rows = np.zeros((2 * len(pairs), len(cols)), dtype=np.int64)
    for k, (x, y) in enumerate(pairs):
        rows[2 * k, speed], rows[2 * k + 1, speed] = (x, y), (y, x)
    rows[:, cols.index("payload")] = hi[cols.index("payload")] // 2
    return rows


def speed_edges(design: Any) -> tuple[int, ...]:
    """Where the design's speed tables change piece besides the deadband's edge (the Stribeck split), and
    where a skid-steer's turning tables do, in speed-difference steps (_edge_rows' rows with the other
    wheel at rest put the difference there)."""
    sources = ("speed", interface.SPEED_DIFFERENCE)
    ends = {p.x1 for t in design.specs.values() if t.source in sources for p in t.pieces[:-1]}
    return tuple(sorted(ends - {design.limits.deadband}))


def feedforward_inputs(
    lim: Any,
    count: int = 10_000,
    seed: int = 20261202,
    *,
    vehicle: Vehicle | None = None,
    edges: tuple[int, ...] = (),
) -> dict[str, np.ndarray]:
    """Inputs in firmware steps: every corner, the deadband edges and the other speed `edges`
    (speed_edges), clamping cases, then random points; in the vehicle's input frame (body-frame
    inputs: the same cases turned into it, plus its own corners)."""
    wheels = _wheel_inputs(lim, count, seed, edges)
    if vehicle is None or not bodyframe.is_body(vehicle):
        return wheels
    return _body_inputs(vehicle, lim, wheels)


def _body_inputs(v: Vehicle, lim: Any, wheels: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """The wheel cases as body-frame inputs (nearest steps), then every combination of each body input's
    edges and zero with both edges of the others, and one step beyond each body edge."""
    st = interface.ff_in(v)
    converted = interface.fields_to_rows(st, bodyframe.from_wheel_fields(v, wheels)).astype(np.int64)
    lo, hi = interface.column_edges(lim, st)
    assert all(m.count == 1 for m in st.members), "a body-frame struct has one column per member"
    grid = [np.unique([lo[k], 0, hi[k]]) if m.body else np.array([lo[k], hi[k]]) for k, m in enumerate(st.members)]
    corners = np.stack(np.meshgrid(*grid, indexing="ij"), -1).reshape(-1, len(lo))
    beyond = np.where(np.arange(len(lo)) % 2 == 0, hi + 1, lo - 1)[None, :]
    return interface.rows_to_fields(st, np.concatenate([corners, beyond, converted]).astype(np.int64))


def _wheel_inputs(lim: Any, count: int, seed: int, edges: tuple[int, ...] = ()) -> dict[str, np.ndarray]:
    """feedforward_inputs in wheel steps."""
    rng = np.random.default_rng(seed)
    lo, hi = interface.column_edges(lim, FF_IN)
    special = [_special_rows(lim, lo, hi), _region_rows(lim, lo, hi), _edge_rows(hi, edges)]
    fixed = np.concatenate([_corners(lo, hi), *special])
    n = max(count - len(fixed), 0)
    rand = np.stack([rng.integers(a, b + 1, n) for a, b in zip(lo, hi)], axis=-1)
    db = lim.deadband
    speed = [FF_IN.columns.index(c) for c in FF_IN.member("speed").columns]
    rand[: n // 10, speed] = rng.integers(-2 * db - 2, 2 * db + 3, (n // 10, 2))
    rows = np.concatenate([fixed, rand]).astype(np.int64)
    return interface.rows_to_fields(FF_IN, rows)


def feedforward_table(fw: Any, count: int = 10_000) -> np.ndarray:
    """Rows of inputs and expected outputs (the FF_OUT columns, then the clamp bits), int64."""
    inp = feedforward_inputs(fw.design.limits, count, vehicle=fw.vehicle, edges=speed_edges(fw.design))
    out = emulate.run(fw.design.feedforward, fw.tables, inp)
    return np.column_stack(
        [
            interface.fields_to_rows(interface.ff_in(fw.vehicle), inp),
            interface.fields_to_rows(FF_OUT, out),
            out["clamped"],
        ]
    )


def header(v: Vehicle) -> tuple[str, ...]:
    """The CSV column names: inputs, outputs, clamp bits."""
    return interface.ff_in(v).columns + FF_OUT.columns + ("clamped",)


def to_csv(fw: Any, rows: np.ndarray) -> str:
    buf = io.StringIO()
    buf.write(
        f"# {fw.vehicle.name}_feedforward golden vectors, fingerprint 0x{fw.fingerprint:08X}; "
        "firmware steps (see the header for units)\n"
    )
    buf.write(",".join(header(fw.vehicle)) + "\n")
    for row in rows:
        buf.write(",".join(str(int(x)) for x in row) + "\n")
    return buf.getvalue()
