"""The comparison as a picture: measured and predicted current over time with the phases shaded, the
residual against speed (where a friction error shows), and the residual histogram."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

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


def write_plot(log: BenchLog, doc: dict[str, Any], path: Path) -> None:
    """One PNG with three panels (right wheel over time; both wheels for the residual)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    pred, res = doc["series"]["predicted"], doc["series"]["residual_full"]
    fig, (top, mid, bottom) = plt.subplots(3, 1, figsize=(10, 9))
    _shade(top, log.t, log.phase)
    top.plot(log.t, log.current[:, 0], lw=0.6, color="#1b6f8a", label="measured (right)")
    top.plot(log.t, pred[:, 0], lw=0.9, color="#c2571a", label="model (right)")
    top.set_xlabel("t [s] (shaded by phase)")
    top.set_ylabel("motor current [A]")
    top.legend(loc="upper right", fontsize=8)
    for k, name in enumerate(("right", "left")):
        mid.plot(log.speed[:, k], res[:, k] * 1000, ".", ms=1, alpha=0.4, label=name)
    mid.set_xlabel("measured rim speed [m/s]")
    mid.set_ylabel("measured - model [mA]")
    mid.legend(loc="upper right", fontsize=8, markerscale=8)
    bottom.hist(res[log.valid].ravel() * 1000, bins=150, color="#6a3d9a")
    tol = doc["tolerance_a"] * 1000
    bottom.axvline(-tol, color="#c2571a", ls="--")
    bottom.axvline(tol, color="#c2571a", ls="--", label=f"tolerance {tol:.3g} mA")
    bottom.set_xlabel("measured - model [mA]")
    bottom.set_ylabel("rows")
    bottom.legend(loc="upper right", fontsize=8)
    fig.tight_layout()
    fig.savefig(path, dpi=90)
    plt.close(fig)
