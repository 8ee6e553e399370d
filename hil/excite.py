"""Excitation for identification: among candidate plans, the one whose regressor (the fitted
parameters' force columns on the planned motion) has the smallest condition number, the criterion of
optimal-excitation work in robot identification (Gautier and Khalil; Swevers et al. 1997)."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from kinetab.generator import dynamics
from kinetab.generator.vehicle import Vehicle

from . import planner
from .planfile import Plan

CANDIDATES = 12


NOISE_OF_LIMIT = 0.01  # assumed current noise: 1 % of the current limit (for telling what a plan determines)


def condition(v: Vehicle, plan: Plan, rig: str) -> tuple[float, list[str]]:
    """Condition number of the column-scaled regressor of the coordinates this plan determines on
    this rig (with white current noise of NOISE_OF_LIMIT of the limit), and those coordinates' names."""
    from . import campaign, identifiability, regressor
    from . import fitparams as fp

    fm = regressor.force_model(v, campaign.planned_rows(v, plan, rig, noise_a=NOISE_OF_LIMIT * v.drive.current_limit_a))
    js = fm.jacobian(fm.x0) * fp.scales(v, fm.x0)
    gram = js.T @ js
    noise = NOISE_OF_LIMIT * v.drive.current_limit_a / dynamics.motor_gain(v)
    free = identifiability.classify(gram, gram * noise**2).free
    if not free:
        return float("inf"), []
    s = np.linalg.svd(js[:, free], compute_uv=False)
    return float(s[0] / s[-1]) if s[-1] > 0 else float("inf"), [fp.names(v)[j] for j in free]


def told_apart(names: list[str], cond: float) -> str:
    """What a plan's regressor determines, in words: how many of the fit's parameters (and, for a few,
    which), then the condition number of their scaled columns (not for one alone: it is 1 by definition)."""
    from . import fitparams as fp

    if not names:
        return f"the fit could determine none of its {len(fp.NAMES)} parameters from it"
    which = f" ({', '.join(names)})" if len(names) <= 3 else ""
    told = f"the fit could determine {len(names)} of its {len(fp.NAMES)} parameters{which}"
    return told if len(names) == 1 else f"{told}, condition number {cond:.3g}"


def plan_for_fit(
    v: Vehicle,
    *,
    duration_s: float,
    period_s: float,
    rig: str,
    payload: float,
    pitch: float = 0.0,
    roll: float = 0.0,
    progress: Callable[[str], None] = lambda _: None,
) -> tuple[Plan, float]:
    """The best of the default plan and CANDIDATES perturbed ones (speeds, accelerations and holds
    scaled 0.6 to 1.4 at random, seeded): the most parameters told apart, then the lowest condition.
    `progress` is told which candidate is being weighed."""
    best: tuple[int, float, Plan] | None = None
    for k, seed in enumerate([None, *range(CANDIDATES)], start=1):
        progress(f"candidate plan {k} of {CANDIDATES + 1}")
        plan = planner.make_plan(
            v, duration_s=duration_s, period_s=period_s, rig=rig, payload=payload, pitch=pitch, roll=roll, seed=seed
        )
        cond, names = condition(v, plan, rig)
        if best is None or (len(names), -cond) > (best[0], -best[1]):
            best = (len(names), cond, plan)
    assert best is not None
    return best[2], best[1]
