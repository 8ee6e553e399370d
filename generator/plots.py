"""`kinetab report`: PNG plots of every table against its function, the error distribution and the
envelope, tied together by an index.html. matplotlib with the Agg backend (no display needed). Every
picture is rendered to bytes first and the set written at once (outputs.write_set), so an interrupted
report leaves the old set in place."""

from __future__ import annotations

import html
import io
import math
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from . import emulate, envelope, interface
from . import tables as tb
from .accuracy import Accuracy, envelope_points, operating_point, reference_current
from .synthesis import Firmware
from .vehicle import Vehicle

ENVELOPE_PAYLOADS = 21
"""Payload points on the envelope plot (the text report keeps its five)."""

Progress = Callable[[str], None]
"""Told what is about to be drawn (the command line shows it on a terminal)."""


def _pyplot() -> Any:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _png(fig: Any) -> bytes:
    """The figure as PNG bytes (closed afterwards)."""
    plt = _pyplot()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=90)
    plt.close(fig)
    return buf.getvalue()


def _quiet(_: str) -> None:
    """No progress shown."""


def _input_axis(fw: Firmware, source: str) -> tuple[float, str]:
    """Axis units per firmware step of a table's input, and the axis unit (angles in degrees, as typed
    on the command line)."""
    m = interface.by_name(source)
    unit, convert = interface.shown(m)
    return convert(interface.lsb(fw.vehicle, m)), unit


def _curves(fw: Firmware, name: str, lo: int, hi: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Inputs (steps), the table's integer result and the model, both in SI, on lo..hi."""
    table = fw.tables[name]
    spec = table.spec
    xs = np.unique(np.linspace(lo, hi, 4001).round().astype(np.int64))
    got = tb.lookup(table, xs) * 2.0**-spec.frac_bits * spec.si_scale
    model_values = tb.lookup_real(table, xs, "model") * 2.0**-spec.frac_bits * spec.si_scale
    return xs, got, model_values


def _breakpoints(fw: Firmware, name: str) -> np.ndarray:
    """Every breakpoint of the table's pieces inside the input range, in input steps, plus each piece's
    last input where the last segment reaches beyond it (a one-segment table over 0..600 with segments
    of 1024 steps is drawn with two dots, not one); mirrored for symmetric tables."""
    table = fw.tables[name]
    pts = [p.x0 + (np.arange(d.segments + 1) << d.shift) for p, d in zip(table.spec.pieces, table.pieces)]
    ends = [np.append(b[b <= p.x1], p.x1) if d.segments else b for b, p, d in zip(pts, table.spec.pieces, table.pieces)]
    bx = np.unique(np.concatenate(ends))
    return np.unique(np.concatenate([-bx, bx])) if table.spec.symmetry != "none" else bx


def _quantity(spec: tb.TableSpec, name: str) -> str:
    """The y label of a table: its name and unit ("m11 [kg]", "sin_pitch [1]")."""
    return f"{name} [{spec.si_unit}]"


def _panel(fw: Firmware, name: str, axes: tuple[Any, Any], *, lo: int, hi: int) -> None:
    """Model and table (breakpoints marked) on top, their difference below, on inputs lo..hi."""
    spec = fw.tables[name].spec
    per_step, unit = _input_axis(fw, spec.source)
    xs, got, model_values = _curves(fw, name, lo, hi)
    top, bottom = axes
    top.plot(xs * per_step, model_values, label="model (float)", lw=2.5, color="#1b6f8a", zorder=1)
    top.plot(xs * per_step, got, label="table (integer)", lw=1, color="#c2571a", zorder=2)
    bx = _breakpoints(fw, name)
    bx = bx[(bx >= lo) & (bx <= hi)]
    top.plot(bx * per_step, np.interp(bx, xs, got), "o", ms=3, color="#c2571a", label="breakpoints", zorder=3)
    top.set_ylabel(_quantity(spec, name))
    top.set_xlabel(f"{spec.source} [{unit}]")
    top.legend(loc="best", fontsize=8)
    bottom.plot(xs * per_step, got - model_values, lw=1, color="#6a3d9a")
    bottom.set_ylabel(f"table - model [{spec.si_unit}]")
    bottom.set_xlabel(f"{spec.source} [{unit}]")


def table_plot(fw: Firmware, name: str) -> bytes:
    """A table against its model (PNG); a table split at the deadband gets a second, zoomed column there."""
    plt = _pyplot()
    spec = fw.tables[name].spec
    hi = spec.pieces[-1].x1
    lo = -hi if spec.symmetry != "none" else spec.pieces[0].x0
    zoom = spec.piece_edge
    fig, axes = plt.subplots(2, 2 if zoom else 1, figsize=(11 if zoom else 7, 6), squeeze=False, layout="constrained")
    fig.suptitle(f"{fw.vehicle.name}: table {name}, {spec.meaning}", fontsize=10)
    _panel(fw, name, (axes[0][0], axes[1][0]), lo=lo, hi=hi)
    axes[0][0].set_title("whole input range", fontsize=9)
    if zoom:
        edge = min(hi, 3 * zoom + 2)
        _panel(fw, name, (axes[0][1], axes[1][1]), lo=-edge, hi=edge)
        axes[0][1].set_title("near zero speed (the deadband, zoomed)", fontsize=9)
    return _png(fig)


def error_plot(fw: Firmware, count: int = 100_000) -> bytes:
    """Histogram (PNG) of the measured error with the proven bound and the budget marked."""
    plt = _pyplot()
    inp = envelope_points(fw, count, 7)
    got = emulate.run(fw.design.feedforward, fw.tables, inp)["current"] * fw.vehicle.firmware.current_lsb_a
    err = (got - reference_current(fw, operating_point(fw, inp))).ravel() * 1000
    fig, ax = plt.subplots(figsize=(7, 4.2), layout="constrained")
    ax.hist(err, bins=200, color="#1b6f8a")
    budget, bound = fw.vehicle.firmware.current_budget_a * 1000, fw.ff_bound_a * 1000
    for x, style, label in ((budget, "--", f"budget {budget:.3g} mA"), (bound, ":", f"proven bound {bound:.3g} mA")):
        ax.axvline(-x, color="#c2571a", ls=style)
        ax.axvline(x, color="#c2571a", ls=style, label=label)
    ax.set_title(
        f"{fw.vehicle.name}: feed-forward current error\n{err.size:,} wheel currents at {err.size // 2:,} "
        "points inside the envelope (corners, deadband and random)",
        fontsize=9,
    )
    ax.set_xlabel("firmware - float model current [mA]")
    ax.set_ylabel("wheel currents (log scale)")
    ax.set_yscale("log")
    ax.legend(loc="upper left", fontsize=8)
    return _png(fig)


def envelope_plot(v: Vehicle, rep: envelope.EnvelopeReport) -> bytes:
    """Gradeability (degrees) and acceleration on pitch_max (m/s^2) against payload (PNG), with the model's
    own pitch_max and accel_max drawn so the margin can be read; the report's peaks in the title."""
    plt = _pyplot()
    rows = [envelope.payload_row(v, float(p)) for p in np.linspace(0, v.payload.mass_max_kg, ENVELOPE_PAYLOADS)]
    pay = [r.payload_kg for r in rows]
    fig, (angles, accel) = plt.subplots(1, 2, figsize=(11, 4.5), layout="constrained")
    fig.suptitle(
        f"{v.name}: envelope (peak current {rep.peak_current.value:.3g} A of {v.drive.current_limit_a:.3g} A, "
        f"voltage {rep.peak_voltage.value:.3g} V of {v.drive.supply_voltage_v:.3g} V, "
        f"grip used {rep.peak_traction.value:.0%})",
        fontsize=10,
    )
    angles.plot(pay, [math.degrees(max(r.hold_pitch_rad, 0)) for r in rows], "o-", ms=3, label="hold, standing")
    angles.plot(pay, [math.degrees(max(r.climb_pitch_rad, 0)) for r in rows], "s-", ms=3, label="climb at accel_max")
    angles.axhline(math.degrees(v.envelope.pitch_max_rad), color="#c2571a", ls="--", label="envelope.pitch_max")
    angles.set_title("largest pitch the drive holds or climbs", fontsize=9)
    angles.set_xlabel("payload [kg]")
    angles.set_ylabel("pitch [deg]")
    angles.set_ylim(bottom=0)
    angles.legend(loc="lower left", fontsize=8)
    accel.plot(pay, [max(r.accel_on_pitch_max_mps2, 0) for r in rows], "^-", ms=3, color="#6a3d9a", label="largest")
    accel.axhline(v.envelope.accel_max_mps2, color="#c2571a", ls="--", label="envelope.accel_max")
    accel.set_title("largest acceleration on pitch_max", fontsize=9)
    accel.set_xlabel("payload [kg]")
    accel.set_ylabel("acceleration [m/s^2]")
    accel.set_ylim(bottom=0)
    accel.legend(loc="lower left", fontsize=8)
    return _png(fig)


def _index(fw: Firmware, acc: Accuracy, names: list[str]) -> str:
    """index.html: the summary line, one row per table and every picture."""
    rows = "".join(
        f"<tr><td>{html.escape(n)}</td><td>{[p.segments for p in t.pieces]}</td><td>{t.bytes}</td>"
        f"<td>{max(e.total for e in fw.errors[n]) * t.spec.si_scale:.4g} {html.escape(t.spec.si_unit)}</td></tr>"
        for n, t in fw.tables.items()
    )
    imgs = "".join(f'<h3>{html.escape(n)}</h3><img src="{n}" alt="{n}">' for n in names)
    return (
        f"<!doctype html><html><head><meta charset='utf-8'><title>kinetab report: {html.escape(fw.vehicle.name)}"
        f"</title></head><body><h1>{html.escape(fw.vehicle.name)}: fixed-point feed-forward</h1>"
        f"<p>Proven bound {fw.ff_bound_a * 1000:.3f} mA, measured max {acc.total.max * 1000:.3f} mA, RMS "
        f"{acc.total.rms * 1000:.3f} mA over {acc.points} points; budget "
        f"{fw.vehicle.firmware.current_budget_a * 1000:.3f} mA; tables {fw.total_bytes} bytes.</p>"
        f"<table border='1'><tr><th>table</th><th>segments</th><th>bytes</th><th>worst error</th></tr>{rows}</table>"
        f"{imgs}</body></html>\n"
    )


def report_files(
    fw: Firmware, acc: Accuracy, rep: envelope.EnvelopeReport, folder: Path, *, progress: Progress = _quiet
) -> dict[Path, str | bytes]:
    """Every PNG and index.html of the report, rendered in memory: file path -> contents. Nothing is
    written here (the caller writes the set at once)."""
    files: dict[Path, str | bytes] = {}
    for i, name in enumerate(fw.tables, start=1):
        progress(f"table {name} ({i} of {len(fw.tables)})")
        files[folder / f"table_{name}.png"] = table_plot(fw, name)
    progress("error distribution")
    files[folder / "error.png"] = error_plot(fw)
    progress("envelope")
    files[folder / "envelope.png"] = envelope_plot(fw.vehicle, rep)
    files[folder / "index.html"] = _index(fw, acc, [p.name for p in files])
    return files
