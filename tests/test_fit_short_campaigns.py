"""The bench fit on short, noisy campaigns against truths nobody chose: random identifiable vehicles
(tests/test_identify.py), truths 10-30 % off in ten coordinates, 10 s runs, current noise 5 % of the
limit. The reference is the truth the plant ran with; the error bars' coverage is judged against the
normal distribution (a +-2 sigma interval holds 95 %: a fact of statistics)."""

from __future__ import annotations

import numpy as np
import pytest
from kinetab.hil import campaign, identify
from kinetab.hil import fitparams as fp

from tests.benchsim import run_plan
from tests.test_identify import changed, float_log, identifiable_vehicle

DURATION_S, NOISE_OF_LIMIT = 10.0, 0.05


@pytest.mark.slow
def test_noise_in_the_current_does_not_shrink_the_scale_every_force_shares():
    """Regression (errors in variables): with the fit written as efficiency * measured current - force,
    the current's noise sat in a regressor and pulled mass, yaw inertia and both efficiencies toward
    zero together, -8 to -10 % (3 sigma) on float-model logs with white noise. The mean over four noise
    draws of each must be within 3 % of the truth (the draws' own spread is about 1 %)."""
    v, rng, design = identifiable_vehicle(31, duration_s=DURATION_S)
    truth, x_true = changed(v, rng, fp.NAMES[:10])
    plans = [(campaign.plan_for(v, c, duration_s=DURATION_S, period_s=0.001), c.rig) for c in design.logs]
    noise = NOISE_OF_LIMIT * v.drive.current_limit_a
    found: dict[str, list[float]] = {}
    for draw in range(4):
        logs = [float_log(truth, p, rig, noise=noise, seed=100 * draw + k) for k, (p, rig) in enumerate(plans)]
        for name, e in identify.fit(v, logs).estimates.items():
            found.setdefault(name, []).append(e.estimate)
    scale = ["body.mass", "drive.efficiency", "drive.backdrive_factor"]
    assert all(len(found.get(n, [])) == 4 for n in scale), sorted(found)
    for name in scale:
        assert np.mean(found[name]) == pytest.approx(x_true[fp.INDEX[name]], rel=0.03), name


@pytest.mark.slow
def test_two_sigma_covers_the_truth_on_short_campaigns_of_random_vehicles():
    """Six random vehicles, two noise draws each, through the controller's plant (speed loop, encoder):
    at least 90 % of the fitted coordinates' +-2 sigma intervals hold the truth (95 % expected). A guard,
    not a regression test: these six pass with the old fit too. On 48 fits of other vehicles it held
    70 % before the fixes (the scale pulled by the current's noise), then 88 % (held values off by more
    than the 10 % then assumed), then 95 %."""
    inside = total = 0
    for seed in range(20, 26):
        v, rng, design = identifiable_vehicle(seed, duration_s=DURATION_S)
        truth, x_true = changed(v, rng, fp.NAMES[:10])
        draws: list[list] = [[], []]
        for k, c in enumerate(design.logs):
            plan = campaign.plan_for(v, c, duration_s=DURATION_S, period_s=0.001)
            noise = NOISE_OF_LIMIT * v.drive.current_limit_a
            made = run_plan(v, truth, plan, rig=c.rig, feedforward=c.rig == "on-floor", noise_a=noise, batch=2, seed=k)
            for b in range(2):
                draws[b].append(made[b])
        for logs in draws:
            for name, e in identify.fit(v, logs).estimates.items():
                if name in fp.INDEX and e.se > 0:
                    total += 1
                    inside += abs(e.estimate - x_true[fp.INDEX[name]]) <= 2 * e.se
    assert total >= 40, total
    assert inside >= 0.9 * total, (inside, total)
