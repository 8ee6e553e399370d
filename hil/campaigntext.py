"""`kinetab bench campaign`: the plans of a designed campaign and the instructions that go with them."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from kinetab.generator.vehicle import Vehicle

from . import campaign, planfile
from .campaign import Candidate


def excursion(plan: planfile.Plan, track_m: float) -> tuple[float, float, float]:
    """How far the plan takes P from where it starts, m: (ahead, behind, to the side, the larger of left
    and right), along the path the wheel speeds drive (turns and spins included)."""
    c = plan.columns
    dt = float(c["t"][1] - c["t"][0])
    heading = np.cumsum((c["speed_right"] - c["speed_left"]) / track_m) * dt
    forward = (c["speed_right"] + c["speed_left"]) / 2
    x, y = np.cumsum(forward * np.cos(heading)) * dt, np.cumsum(forward * np.sin(heading)) * dt
    return float(max(x.max(), 0.0)), float(max(-x.min(), 0.0)), float(np.max(np.abs(y)))


def _path_words(plan: planfile.Plan) -> str:
    """What the plan's wheel speeds do, in words: turn (they differ) and spin (opposite signs), or not.
    Regression (a trial): a 10 s plan that never turned was described as turning and spinning."""
    right, left = plan.columns["speed_right"], plan.columns["speed_left"]
    tiny = 1e-9 * max(float(np.max(np.abs(right))), float(np.max(np.abs(left))), 1e-12)
    turns = bool(np.any(np.abs(right - left) > tiny))
    spins = bool(np.any((right * left < 0) & (np.minimum(np.abs(right), np.abs(left)) > tiny)))
    return "turns and spins" if spins else "turns" if turns else "drives straight, without turning"


def _needs(c: Candidate, plan: planfile.Plan, v: Vehicle) -> str:
    if c.rig == "wheels-up":
        wheels = "both drive wheels" if v.skid is None else "every driven wheel"
        return f"the vehicle on a stand, {wheels} free to turn; the controller adds no feed-forward"
    ahead, back, side = excursion(plan, v.wheels.track_m)
    size = v.wheels.track_m if v.skid is None else max(v.wheels.track_m, v.skid.wheelbase_m + v.wheels.diameter_m)
    room = 0.5 + size  # beyond P's path: the vehicle's own size, roughly, and a margin
    ground = (
        f"a ramp of {np.degrees(c.pitch_rad):.3g} deg (front higher), straight and at least "
        f"{ahead + back + 2 * room:.1f} m long (the plan drives straight on it: a turn would change the slope "
        "it stands on)"
        if c.pitch_rad
        else f"a level floor with {ahead + room:.1f} m clear ahead, {back + room:.1f} m behind and "
        f"{side + room:.1f} m to either side (the plan {_path_words(plan)})"
    )
    load = f"a payload of {c.payload_kg:.4g} kg placed where the model's payload sits" if c.payload_kg else "no payload"
    return f"{ground}; {load}"


def campaign_files(
    v: Vehicle, model_path: Path, out: Path, *, duration_s: float, period_s: float, noise_a: float | None
) -> tuple[dict[Path, str], str]:
    """{path: text} of the plans and CAMPAIGN.txt, and the text to print."""
    noise = noise_a if noise_a is not None else campaign.NOISE_OF_LIMIT * v.drive.current_limit_a
    design = campaign.choose_runs(v, noise_a=noise, duration_s=duration_s, period_s=period_s)
    files: dict[Path, str] = {}
    lines = [
        f"# Bench campaign for {v.name}",
        "",
        f"{len(design.logs)} runs of {duration_s:g} s at {period_s * 1000:g} ms, chosen so `kinetab bench fit` "
        f"can determine every parameter (judged from the planned motion with {noise * 1000:.4g} mA of current noise).",
        "Run them in this order; each needs the cautions of README (restrain the vehicle, emergency stop within",
        "reach, current limits set in the drive, nobody in the path).",
        "",
    ]
    logs = []
    for k, c in enumerate(design.logs, start=1):
        plan = campaign.plan_for(v, c, duration_s=duration_s, period_s=period_s)
        name = f"{k}-{c.slug()}"
        files[out / f"{name}.csv"] = planfile.to_csv(plan, v)
        files[out / f"{name}.json"] = planfile.side_text(v, rig=c.rig)
        log = out / f"{name}-log.csv"
        logs.append(str(log))
        lines += [
            f"{k}. {c.label()}: {_needs(c, plan, v)}.",
            f"   kinetab bench run {model_path} --port PORT --plan {out / (name + '.csv')} --log {log} --rig {c.rig}",
            "",
        ]
    lines.append(f"Then: kinetab bench fit {model_path} {' '.join(logs)} --write fitted.toml")
    if design.held:
        held = "; ".join(", ".join(h) for h in design.held)
        lines.append(
            f"By this reckoning the fit may still hold: {held}. The reckoning asks three times the precision the "
            "fit needs; longer runs (--duration) or a quieter drive (--noise) may separate them, and `bench fit` "
            "names the further run that would."
        )
    text = "\n".join(lines) + "\n"
    files[out / "CAMPAIGN.txt"] = text
    return files, text
