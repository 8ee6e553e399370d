"""Golden vectors: firmware inputs (random, corners, deadband, clamping) with the emulator's outputs.

The CSV is for the firmware's own unit tests: one row per call of <name>_feedforward.
"""

from __future__ import annotations

import io
import itertools

import numpy as np

from . import emulate
from .program import Limits
from .synthesis import Firmware

FF_COLUMNS = ("speed_right", "speed_left", "accel_right", "accel_left", "pitch", "roll", "payload")


def feedforward_inputs(lim: Limits, count: int = 10_000, seed: int = 20261202) -> dict[str, np.ndarray]:
    """Inputs in firmware steps: every corner, the deadband edges, clamping cases, then random points."""
    rng = np.random.default_rng(seed)
    s, a, p, r, m, db = lim.speed, lim.accel, lim.pitch, lim.roll, lim.payload, lim.deadband
    corners = np.array(list(itertools.product((-s, 0, s), (-s, 0, s), (-a, 0, a), (-a, 0, a), (-p, p), (-r, r), (0, m))))
    edge = np.array([-db - 1, -db, -db + 1, -1, 0, 1, db - 1, db, db + 1])
    dead = np.array([[u, w, 0, 0, 0, 0, m // 2] for u in edge for w in edge])
    big = np.iinfo(np.int32)
    outside = np.array([[s + 1, -s - 1, a + 1, -a - 1, p + 1, -r - 1, m + 1],
                        [big.max, big.min, big.max, big.min, big.max, big.min, big.max],
                        [big.min, big.max, big.min, big.max, big.min, big.max, big.min],
                        [2 * s, 2 * s, 0, 0, 0, 0, -1]])
    fixed = np.concatenate([corners, dead, outside])
    n = max(count - len(fixed), 0)
    rand = np.stack([rng.integers(-s, s + 1, n), rng.integers(-s, s + 1, n), rng.integers(-a, a + 1, n),
                     rng.integers(-a, a + 1, n), rng.integers(-p, p + 1, n), rng.integers(-r, r + 1, n),
                     rng.integers(0, m + 1, n)], axis=-1)
    near = rng.integers(-2 * db - 2, 2 * db + 3, (n // 10, 2))
    rand[: n // 10, :2] = near
    rows = np.concatenate([fixed, rand]).astype(np.int64)
    return split_columns(rows)


def split_columns(rows: np.ndarray) -> dict[str, np.ndarray]:
    return {"speed": rows[:, 0:2], "accel": rows[:, 2:4], "pitch": rows[:, 4], "roll": rows[:, 5], "payload": rows[:, 6]}


def feedforward_table(fw: Firmware, count: int = 10_000) -> np.ndarray:
    """Rows of inputs and expected outputs (current right, left, clamped bits), int64."""
    inp = feedforward_inputs(fw.design.limits, count)
    out = emulate.run(fw.design.feedforward, fw.tables, inp)
    return np.column_stack([inp["speed"], inp["accel"], inp["pitch"], inp["roll"], inp["payload"],
                            out["current"], out["clamped"]])


def to_csv(fw: Firmware, rows: np.ndarray) -> str:
    buf = io.StringIO()
    buf.write(f"# {fw.vehicle.name}_feedforward golden vectors, fingerprint 0x{fw.fingerprint:08X}; "
              "firmware steps (see the header for units)\n")
    buf.write(",".join(FF_COLUMNS + ("current_right", "current_left", "clamped")) + "\n")
    for row in rows:
        buf.write(",".join(str(int(x)) for x in row) + "\n")
    return buf.getvalue()
