"""`kinetab report`: PNG plots of every table against its function, the error distribution and the
envelope, tied together by an index.html. matplotlib with the Agg backend (no display needed)."""

from __future__ import annotations

import html
import math
from pathlib import Path
from typing import Any

import numpy as np

from . import emulate, envelope
from . import tables as tb
from .accuracy import Accuracy, envelope_points, operating_point, reference_current
from .synthesis import Firmware


def _pyplot() -> Any:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


AXIS = {"payload": ("kg", 1.0), "pitch": ("deg", 180 / math.pi), "roll": ("deg", 180 / math.pi), "speed": ("m/s", 1.0)}
"""Per table input: the axis unit and the factor from SI (angles in degrees, as the command line)."""


def _input_axis(fw: Firmware, source: str) -> tuple[float, str]:
    """Axis units per firmware step of the input, and the axis unit."""
    lsb = {
        "payload": fw.vehicle.firmware.mass_lsb_kg,
        "pitch": fw.vehicle.firmware.angle_lsb_rad,
        "roll": fw.vehicle.firmware.angle_lsb_rad,
        "speed": fw.vehicle.firmware.speed_lsb_mps,
    }[source]
    unit, factor = AXIS[source]
    return lsb * factor, unit


def _curves(fw: Firmware, name: str, lo: int, hi: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Inputs (steps), the table's integer result and the model, both in SI, on lo..hi."""
    table = fw.tables[name]
    spec = table.spec
    xs = np.unique(np.linspace(lo, hi, 4001).round().astype(np.int64))
    got = tb.lookup(table, xs) * 2.0**-spec.frac_bits * spec.si_scale
    exact = tb.lookup_real(table, xs, "exact") * 2.0**-spec.frac_bits * spec.si_scale
    return xs, got, exact


def _breakpoints(fw: Firmware, name: str) -> np.ndarray:
    """Every breakpoint of the table's pieces in input steps (mirrored for symmetric tables)."""
    table = fw.tables[name]
    pts = [p.x0 + (np.arange(d.segments + 1) << d.shift) for p, d in zip(table.spec.pieces, table.pieces)]
    bx = np.concatenate([b[b <= p.x1] for b, p in zip(pts, table.spec.pieces)])
    return np.concatenate([-bx, bx]) if table.spec.symmetry != "none" else bx


def _panel(fw: Firmware, name: str, axes: tuple[Any, Any], *, lo: int, hi: int) -> None:
    """Model and table (breakpoints marked) on top, their difference below, on inputs lo..hi."""
    spec = fw.tables[name].spec
    per_step, unit = _input_axis(fw, spec.source)
    xs, got, exact = _curves(fw, name, lo, hi)
    top, bottom = axes
    top.plot(xs * per_step, exact, label="model (float)", lw=2.5, color="#1b6f8a", zorder=1)
    top.plot(xs * per_step, got, label="table (integer)", lw=1, color="#c2571a", zorder=2)
    bx = _breakpoints(fw, name)
    bx = bx[(bx >= lo) & (bx <= hi)]
    top.plot(bx * per_step, np.interp(bx, xs, got), "o", ms=3, color="#c2571a", label="breakpoints", zorder=3)
    top.set_ylabel(spec.si_unit if spec.si_unit != "1" else "value (no unit)")
    top.legend(loc="best", fontsize=8)
    bottom.plot(xs * per_step, got - exact, lw=1, color="#6a3d9a")
    bottom.set_ylabel(f"table - model [{spec.si_unit}]" if spec.si_unit != "1" else "table - model")
    bottom.set_xlabel(f"{spec.source} [{unit}]")


def table_plot(fw: Firmware, name: str, path: Path) -> None:
    """A table against its model; a table split at the deadband gets a second, zoomed column there."""
    plt = _pyplot()
    spec = fw.tables[name].spec
    hi = spec.pieces[-1].x1
    lo = -hi if spec.symmetry != "none" else spec.pieces[0].x0
    zoom = spec.split_at
    fig, axes = plt.subplots(2, 2 if zoom else 1, figsize=(11 if zoom else 7, 5.5), squeeze=False)
    _panel(fw, name, (axes[0][0], axes[1][0]), lo=lo, hi=hi)
    axes[0][0].set_title(f"{name}: {spec.meaning}", fontsize=9)
    if zoom:
        edge = min(hi, 3 * zoom + 2)
        _panel(fw, name, (axes[0][1], axes[1][1]), lo=-edge, hi=edge)
        axes[0][1].set_title("near zero speed (the deadband, zoomed)", fontsize=9)
    fig.tight_layout()
    fig.savefig(path, dpi=90)
    plt.close(fig)


def error_plot(fw: Firmware, path: Path, count: int = 100_000) -> None:
    """Histogram of the measured error with the proven bound and the budget marked."""
    plt = _pyplot()
    inp = envelope_points(fw, count, 7)
    got = emulate.run(fw.design.feedforward, fw.tables, inp)["current"] * fw.vehicle.firmware.current_lsb_a
    err = (got - reference_current(fw, operating_point(fw, inp))).ravel() * 1000
    fig, ax = plt.subplots(figsize=(7, 4))
    ax.hist(err, bins=200, color="#1b6f8a")
    budget, bound = fw.vehicle.firmware.current_budget_a * 1000, fw.ff_bound_a * 1000
    for x, style, label in ((budget, "--", f"budget {budget:.3g} mA"), (bound, ":", f"proven bound {bound:.3g} mA")):
        ax.axvline(-x, color="#c2571a", ls=style)
        ax.axvline(x, color="#c2571a", ls=style, label=label)
    ax.set_xlabel("firmware - float model current [mA]")
    ax.set_ylabel("points")
    ax.set_yscale("log")
    ax.legend(loc="upper left", fontsize=8)
    fig.tight_layout()
    fig.savefig(path, dpi=90)
    plt.close(fig)


def envelope_plot(rep: envelope.EnvelopeReport, path: Path) -> None:
    """Gradeability (degrees) and acceleration on pitch_max (m/s^2) against payload, one axis each."""
    plt = _pyplot()
    pay = [r.payload_kg for r in rep.rows]
    fig, (angles, accel) = plt.subplots(1, 2, figsize=(11, 4))
    angles.plot(pay, [math.degrees(max(r.hold_pitch_rad, 0)) for r in rep.rows], "o-", label="hold, standing")
    angles.plot(pay, [math.degrees(max(r.climb_pitch_rad, 0)) for r in rep.rows], "s-", label="climb at accel_max")
    angles.set_xlabel("payload [kg]")
    angles.set_ylabel("largest pitch [deg]")
    angles.set_ylim(bottom=0)
    angles.legend(loc="lower left", fontsize=8)
    accel.plot(pay, [max(r.accel_on_pitch_max_mps2, 0) for r in rep.rows], "^-", color="#6a3d9a")
    accel.set_xlabel("payload [kg]")
    accel.set_ylabel("largest acceleration on pitch_max [m/s^2]")
    accel.set_ylim(bottom=0)
    fig.tight_layout()
    fig.savefig(path, dpi=90)
    plt.close(fig)


def write_report(fw: Firmware, acc: Accuracy, rep: envelope.EnvelopeReport, folder: Path) -> list[str]:
    """All PNGs and index.html into folder; returns the file names written."""
    folder.mkdir(parents=True, exist_ok=True)
    names = []
    for name in fw.tables:
        table_plot(fw, name, folder / f"table_{name}.png")
        names.append(f"table_{name}.png")
    error_plot(fw, folder / "error.png")
    envelope_plot(rep, folder / "envelope.png")
    names += ["error.png", "envelope.png"]
    rows = "".join(
        f"<tr><td>{html.escape(n)}</td><td>{[p.segments for p in t.pieces]}</td><td>{t.bytes}</td>"
        f"<td>{max(e.total for e in fw.errors[n]) * t.spec.si_scale:.4g} {html.escape(t.spec.si_unit)}</td></tr>"
        for n, t in fw.tables.items()
    )
    imgs = "".join(f'<h3>{html.escape(n)}</h3><img src="{n}" alt="{n}">' for n in names)
    page = (
        f"<!doctype html><html><head><meta charset='utf-8'><title>kinetab report: {html.escape(fw.vehicle.name)}"
        f"</title></head><body><h1>{html.escape(fw.vehicle.name)}: fixed-point feed-forward</h1>"
        f"<p>Proven bound {fw.ff_bound_a * 1000:.3f} mA, measured max {acc.total.max * 1000:.3f} mA, RMS "
        f"{acc.total.rms * 1000:.3f} mA over {acc.points} points; budget "
        f"{fw.vehicle.firmware.current_budget_a * 1000:.3f} mA; tables {fw.total_bytes} bytes.</p>"
        f"<table border='1'><tr><th>table</th><th>segments</th><th>bytes</th><th>worst error</th></tr>{rows}</table>"
        f"{imgs}</body></html>\n"
    )
    (folder / "index.html").write_text(page, encoding="utf-8")
    return names + ["index.html"]
