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


def table_plot(fw: Firmware, name: str, path: Path) -> None:
    plt = _pyplot()
    table = fw.tables[name]
    spec = table.spec
    lsb = {
        "payload": fw.vehicle.firmware.mass_lsb_kg,
        "pitch": fw.vehicle.firmware.angle_lsb_rad,
        "roll": fw.vehicle.firmware.angle_lsb_rad,
        "speed": fw.vehicle.firmware.speed_lsb_mps,
    }[spec.source]
    hi = spec.pieces[-1].x1
    xs = np.unique(
        np.linspace(-hi if spec.symmetry != "none" else spec.pieces[0].x0, hi, 4001).round().astype(np.int64)
    )
    got = tb.lookup(table, xs) * 2.0**-spec.frac_bits * spec.si_scale
    exact = tb.lookup_real(table, xs, "exact") * 2.0**-spec.frac_bits * spec.si_scale
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(7, 5.5), sharex=True)
    top.plot(xs * lsb, exact, label="model (float)", lw=2, color="#1b6f8a")
    top.plot(xs * lsb, got, label="table (integer)", lw=1, ls="--", color="#c2571a")
    top.set_ylabel(spec.si_unit)
    top.set_title(f"{name}: {spec.meaning}")
    top.legend()
    bottom.plot(xs * lsb, got - exact, lw=1, color="#6a3d9a")
    bottom.set_ylabel(f"table - model [{spec.si_unit}]")
    bottom.set_xlabel(
        f"{spec.source} [{ {'payload': 'kg', 'pitch': 'rad', 'roll': 'rad', 'speed': 'm/s'}[spec.source] }]"
    )
    fig.tight_layout()
    fig.savefig(path, dpi=90)
    plt.close(fig)


def error_plot(fw: Firmware, path: Path, count: int = 100_000) -> None:
    plt = _pyplot()
    inp = envelope_points(fw, count, 7)
    got = emulate.run(fw.design.feedforward, fw.tables, inp)["current"] * fw.vehicle.firmware.current_lsb_a
    err = (got - reference_current(fw, operating_point(fw, inp))).ravel() * 1000
    fig, ax = plt.subplots(figsize=(7, 4))
    ax.hist(err, bins=200, color="#1b6f8a")
    budget = fw.vehicle.firmware.current_budget_a * 1000
    for x in (-budget, budget):
        ax.axvline(x, color="#c2571a", ls="--")
    ax.set_xlabel("firmware - float model current [mA] (dashed: budget)")
    ax.set_ylabel("points")
    ax.set_yscale("log")
    fig.tight_layout()
    fig.savefig(path, dpi=90)
    plt.close(fig)


def envelope_plot(rep: envelope.EnvelopeReport, path: Path) -> None:
    plt = _pyplot()
    pay = [r.payload_kg for r in rep.rows]
    fig, ax = plt.subplots(figsize=(7, 4))
    ax.plot(pay, [math.degrees(max(r.hold_pitch_rad, 0)) for r in rep.rows], "o-", label="hold pitch [deg]")
    ax.plot(
        pay, [math.degrees(max(r.climb_pitch_rad, 0)) for r in rep.rows], "s-", label="climb pitch at accel_max [deg]"
    )
    ax.plot(pay, [max(r.accel_on_pitch_max_mps2, 0) for r in rep.rows], "^-", label="accel on pitch_max [m/s^2]")
    ax.set_xlabel("payload [kg]")
    ax.legend()
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
