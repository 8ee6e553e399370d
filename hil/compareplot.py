"""The comparison as a picture: measured and model current over time for each wheel with the phases
shaded (and a legend for them), the RMS residual per phase and wheel as bars against the tolerance
(the tolerance applies to the RMS, so that is where it is drawn), and the residual against speed."""

from __future__ import annotations

import io
from pathlib import Path
from typing import Any

import numpy as np
from kinetab.generator import interface, outputs

from .benchdata import BenchLog

PHASE_COLOURS = {
    "deadband": "#dddddd",
    "accelerating": "#d9ecd0",
    "cruising": "#f4f4f4",
    "decelerating": "#f6dcd0",
    "turning": "#d6e4f0",
    "spin": "#eadcf0",
}


def _shade(ax: Any, t: np.ndarray, phase: np.ndarray) -> None:
    start = 0
    for k in range(1, len(t) + 1):
        if k == len(t) or phase[k] != phase[start]:
            ax.axvspan(t[start], t[k - 1], color=PHASE_COLOURS.get(str(phase[start]), "#ffffff"), lw=0)
            start = k


def _currents(axes: Any, log: BenchLog, pred: np.ndarray) -> None:
    """One panel per wheel: measured and model current over time, phases shaded, a legend for both."""
    from matplotlib.patches import Patch

    for k, (ax, side) in enumerate(zip(axes, interface.SIDES)):
        _shade(ax, log.t, log.phase)
        ax.plot(log.t, log.current[:, k], lw=0.6, color="#1b6f8a", label="measured")
        ax.plot(log.t, pred[:, k], lw=0.9, color="#c2571a", label="model")
        ax.set_ylabel(f"{side} motor current [A]")
        ax.set_xlabel("time t [s]")
        present = [p for p in PHASE_COLOURS if np.any(log.phase == p)]
        handles = ax.get_legend_handles_labels()[0] + [Patch(color=PHASE_COLOURS[p], label=p) for p in present]
        ax.legend(handles=handles, loc="upper right", fontsize=7, ncol=2)


def _phase_bars(ax: Any, doc: dict[str, Any]) -> None:
    """RMS residual per phase and wheel against the tolerance and the noise floor."""
    names = ["all", *doc["phases"]]
    rows = {"all": doc["wheels"], **doc["phases"]}
    x = np.arange(len(names))
    for k, side in enumerate(interface.SIDES):
        ax.bar(x + (k - 0.5) * 0.38, [rows[n][side]["rms"] * 1000 for n in names], 0.38, label=f"{side} wheel")
    ax.axhline(
        doc["tolerance_a"] * 1000, color="#c2571a", ls="--", label=f"tolerance {doc['tolerance_a'] * 1000:.3g} mA"
    )
    ax.axhline(
        doc["noise_floor_a"] * 1000, color="#555555", ls=":", label=f"noise floor {doc['noise_floor_a'] * 1000:.3g} mA"
    )
    ax.set_xticks(x, names, fontsize=8)
    ax.set_ylabel("RMS of measured - model [mA]")
    ax.set_xlabel("phase (the tolerance applies to each wheel's RMS over all rows)")
    ax.legend(loc="upper right", fontsize=7)


def render(log: BenchLog, doc: dict[str, Any], *, model_name: str) -> bytes:
    """The PNG, as bytes."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    pred, res = doc["series"]["predicted"], doc["series"]["residual_full"]
    fig, axes = plt.subplots(4, 1, figsize=(10, 13))
    verdict = "PASS" if doc["passed"] else "FAIL"
    rms = ", ".join(f"{s} {doc['wheels'][s]['rms'] * 1000:.1f} mA" for s in interface.SIDES)
    fig.suptitle(f"{model_name} against {Path(doc['log']).name} ({doc['rig']}): {verdict} (RMS {rms})")
    _currents(axes[:2], log, pred)
    _phase_bars(axes[2], doc)
    for k, side in enumerate(interface.SIDES):
        axes[3].plot(log.speed[log.valid, k], res[log.valid, k] * 1000, ".", ms=1, alpha=0.4, label=f"{side} wheel")
    axes[3].set_xlabel("measured rim speed [m/s]")
    axes[3].set_ylabel("measured - model [mA]")
    axes[3].legend(loc="upper right", fontsize=7, markerscale=8)
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=90)
    plt.close(fig)
    return buf.getvalue()


def write_plot(log: BenchLog, doc: dict[str, Any], path: Path, *, model_name: str = "") -> None:
    """Render and write atomically (one line, exit 2, when it cannot be written)."""
    outputs.write_file(path, render(log, doc, model_name=model_name or "model"))
