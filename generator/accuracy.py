"""End-to-end error of the integer feed-forward against the float model, measured (not bounded).

Points: all envelope corners, the deadband region and at least 100 000 random points, all at
integer firmware inputs converted exactly to SI, so the budget covers everything after the inputs.
The error is split by re-running the same program without rounding: interpolation (unrounded
breakpoints), quantisation (stored entries), arithmetic rounding (the integer ops themselves).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import bodyframe, dynamics, emulate, interface, region
from .interface import FF_IN
from .synthesis import Firmware
from .tablespecs import Limits
from .vectors import feedforward_inputs, speed_edges
from .vehicle import Vehicle


@dataclass(frozen=True)
class Stat:
    max: float
    rms: float


@dataclass(frozen=True)
class Accuracy:
    """Amps throughout; `where` describes the worst point in SI units."""

    points: int
    total: Stat
    interpolation: Stat
    quantisation: Stat
    arithmetic: Stat
    where: str
    clamping: Stat
    input_resolution: dict[str, float]


def operating_point(fw: Firmware, inp: dict[str, np.ndarray]) -> dynamics.OperatingPoint:
    """Feed-forward inputs in firmware steps -> the SI operating point the integer program computes for:
    the inputs themselves, or for body-frame inputs the wheel steps its conversion makes of them (exact
    with whole-number ratios; else within bodyframe.Conversion.deviation of exact_point)."""
    if interface.ff_in(fw.vehicle).body:
        return dynamics.OperatingPoint(**interface.to_si(fw.vehicle, FF_IN, bodyframe.wheel_fields(fw.vehicle, inp)))
    return exact_point(fw, inp)


def exact_point(fw: Firmware, inp: dict[str, np.ndarray]) -> dynamics.OperatingPoint:
    """Feed-forward inputs in firmware steps -> the SI operating point they stand for (exact)."""
    return dynamics.OperatingPoint(**interface.to_si(fw.vehicle, interface.ff_in(fw.vehicle), inp))


def reference_current(fw: Firmware, op: dynamics.OperatingPoint) -> np.ndarray:
    """Float-model motor current of both wheels, A, shape (n, 2)."""
    return dynamics.wheel_currents(fw.vehicle, op)


def _stat(err: np.ndarray) -> Stat:
    return Stat(float(np.max(np.abs(err))), float(np.sqrt(np.mean(err**2))))


def inside_envelope(v: Vehicle, lim: Limits, rows: np.ndarray) -> np.ndarray:
    """Which rows of feed-forward inputs (steps) lie inside the envelope: every column within its edges,
    and the speed and acceleration pairs inside their regions (region.py); body-frame inputs whose
    wheel values (the firmware's conversion) lie within each wheel's edge."""
    st = interface.ff_in(v)
    lo, hi = interface.column_edges(lim, st)
    ok = np.all((rows >= lo) & (rows <= hi), axis=1)
    fields = interface.rows_to_fields(st, rows)
    if st.body:
        return ok & bodyframe.inside(v, fields, {"speed": lim.speed, "accel": lim.accel})
    for name, pair in (("speed", lim.speed_pair), ("accel", lim.accel_pair)):
        ok &= region.inside(fields[name][:, 0], fields[name][:, 1], pair)
    return ok


def envelope_points(fw: Firmware, count: int, seed: int) -> dict[str, np.ndarray]:
    """Corners, deadband and speed-edge cases (inside the envelope only) plus `count` random points."""
    lim, st = fw.design.limits, interface.ff_in(fw.vehicle)
    inp = feedforward_inputs(lim, count + 3000, seed, vehicle=fw.vehicle, edges=speed_edges(fw.design))
    rows = interface.fields_to_rows(st, inp)
    return interface.rows_to_fields(st, rows[inside_envelope(fw.vehicle, lim, rows)])


def _describe_input(fw: Firmware, inp: dict[str, np.ndarray], k: int, side: int) -> str:
    point = exact_point(fw, {n: a[k] for n, a in inp.items()})
    si = {name: float(getattr(point, name)) for name in FF_IN.si_names().values()}
    return interface.describe_point(FF_IN, si, interface.SIDES[side], digits=4)


def _clamping(fw: Firmware, seed: int) -> Stat:
    """Error from clamping: points up to 10 % beyond the envelope against the unclamped float model."""
    rng = np.random.default_rng(seed + 1)
    n = 2000
    lo, hi = interface.column_edges(fw.design.limits, FF_IN)
    rows = np.stack([rng.integers(a - (a != 0) * (b // 10), b + b // 10 + 1, n) for a, b in zip(lo, hi)], -1)
    inp = interface.rows_to_fields(FF_IN, rows)  # 10 % beyond in wheel values, in either input form
    if interface.ff_in(fw.vehicle).body:
        inp = bodyframe.from_wheel_fields(fw.vehicle, inp)
    got = emulate.run(fw.design.feedforward, fw.tables, inp)["current"] * fw.vehicle.firmware.current_lsb_a
    return _stat(got - reference_current(fw, exact_point(fw, inp)))


def _input_resolution(fw: Firmware, inp: dict[str, np.ndarray]) -> dict[str, float]:
    """Largest current change from moving one input by half its firmware step (what the LSB choice costs);
    for body-frame inputs also `conversion`, what their rounding to wheel steps costs (0 when exact)."""
    base = reference_current(fw, exact_point(fw, inp))
    out = {}
    for name in (m.name for m in interface.ff_in(fw.vehicle).members):
        moved = {k: v.astype(float) for k, v in inp.items()}
        moved[name] = moved[name] + 0.5
        out[name] = float(np.max(np.abs(reference_current(fw, exact_point(fw, moved)) - base)))
    if interface.ff_in(fw.vehicle).body:
        lossless = all(bodyframe.mix(fw.vehicle, pair).lossless for pair in interface.BODY_PAIRS)
        moved = np.abs(reference_current(fw, operating_point(fw, inp)) - base)
        out["conversion"] = 0.0 if lossless else float(np.max(moved))  # lossless: only float dust would show
    return out


def measure(fw: Firmware, count: int = 100_000, seed: int = 7) -> Accuracy:
    """Measured end-to-end error and its split over the envelope, A."""
    inp = envelope_points(fw, count, seed)
    ref = reference_current(fw, operating_point(fw, inp))
    lsb = fw.vehicle.firmware.current_lsb_a
    run = lambda mode: emulate.run(fw.design.feedforward, fw.tables, inp, mode)["current"] * lsb  # noqa: E731
    got, quant, interp = run("int"), run("quant"), run("interp")
    err = got - ref
    k, side = np.unravel_index(int(np.argmax(np.abs(err))), err.shape)
    return Accuracy(
        points=len(inp["pitch"]),
        total=_stat(err),
        interpolation=_stat(interp - ref),
        quantisation=_stat(quant - interp),
        arithmetic=_stat(got - quant),
        where=_describe_input(fw, inp, int(k), int(side)),
        clamping=_clamping(fw, seed),
        input_resolution=_input_resolution(fw, inp),
    )
