"""Excitation for identification: among candidate plans, the one whose regressor (the fitted
parameters' force columns on the planned motion) has the smallest condition number, the criterion of
optimal-excitation work in robot identification (Gautier and Khalil; Swevers et al. 1997)."""

from __future__ import annotations

import numpy as np
from kinetab.generator import dynamics
from kinetab.generator.vehicle import Vehicle

from . import identify, planner
from .planfile import Plan

CANDIDATES = 12


def condition(v: Vehicle, plan: Plan, rig: str) -> tuple[float, list[str]]:
    """Condition number of the column-normalised regressor of the parameters this plan excites and can
    tell apart on this rig, and those parameters' names."""
    c = plan.columns
    op = dynamics.OperatingPoint(
        c["payload"], c["speed_right"], c["speed_left"], c["accel_right"], c["accel_left"], c["pitch"], c["roll"]
    )
    d = identify.Data([(op, rig)], np.zeros(2 * len(plan)), [])
    _, x = identify.regressor(v, d, identify.PARAMS)
    keep, _ = identify.classify(x, identify.PARAMS, np.array([p.get(v) for p in identify.PARAMS]))
    xs = x[:, keep] / np.linalg.norm(x[:, keep], axis=0)
    s = np.linalg.svd(xs, compute_uv=False)
    return float(s[0] / s[-1]), [identify.PARAMS[j].name for j in keep]


def plan_for_fit(v: Vehicle, *, duration_s: float, period_s: float, rig: str, payload: float) -> tuple[Plan, float]:
    """The best of the default plan and CANDIDATES perturbed ones (speeds, accelerations and holds
    scaled 0.6 to 1.4 at random, seeded): the most parameters told apart, then the lowest condition."""
    best: tuple[int, float, Plan] | None = None
    for seed in [None, *range(CANDIDATES)]:
        plan = planner.make_plan(v, duration_s=duration_s, period_s=period_s, rig=rig, payload=payload, seed=seed)
        cond, names = condition(v, plan, rig)
        if best is None or (len(names), -cond) > (best[0], -best[1]):
            best = (len(names), cond, plan)
    assert best is not None
    return best[2], best[1]
