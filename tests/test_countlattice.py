"""Measured speeds as whole encoder counts per period rounded to the firmware's speed step
(hil/countlattice.py): the count step is recovered from the levels alone, the rounding undone, and other
signals left alone; and the fit on logs whose speeds are so rounded is no longer pulled off its truth."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from kinetab.generator import dynamics
from kinetab.hil import campaign, countlattice, identify
from kinetab.hil import fitparams as fp

from tests.benchsim import run_plan
from tests.test_identify import changed, identifiable_vehicle


@pytest.mark.parametrize("seed", range(8))
def test_the_count_step_is_recovered_and_the_rounding_undone(seed):
    """A random walk of counts per period (a wheel speeding up, cruising, reversing), each times a random
    count step c of 1.6 to 40 speed steps, rounded to the step as a controller reports it: c comes back
    within the interval the levels allow, and every speed is its count times c."""
    rng = np.random.default_rng(seed)
    lsb = float(rng.uniform(1e-4, 2e-3))
    c = lsb * float(rng.uniform(1.6, 40))
    counts = np.cumsum(rng.integers(-1, 2, 20000))
    counts = np.clip(counts, -80, 80)
    reported = np.round(counts * c / lsb) * lsb
    found = countlattice.count_step(reported, lsb)
    top = np.max(np.abs(counts))
    assert found is not None and abs(found - c) <= lsb / top, (found, c)
    assert np.allclose(countlattice.on_counts(reported, lsb), counts * found, rtol=0, atol=1e-12)
    assert np.max(np.abs(countlattice.on_counts(reported, lsb) - counts * c)) <= lsb / 2  # closer than the step


def test_signals_that_are_not_such_a_lattice_are_left_alone():
    rng = np.random.default_rng(3)
    lsb = 5e-4
    smooth = np.round(np.sin(np.linspace(0, 20, 5000)) * 0.3 / lsb) * lsb  # a filtered speed: every level
    assert countlattice.count_step(smooth, lsb) is None
    assert countlattice.on_counts(smooth, lsb) is smooth
    fine = np.round(np.cumsum(rng.integers(-1, 2, 5000)) * 1.2)  # count step within 1.5 speed steps
    assert countlattice.count_step(fine * lsb, lsb) is None
    few = np.array([0.0, 13 * lsb, 26 * lsb, -13 * lsb])  # too few levels to believe a lattice
    assert countlattice.count_step(few, lsb) is None


@pytest.mark.slow  # three 20 s logs simulated twice and fitted three times (about 30 s)
def test_a_fit_on_rounded_speeds_gives_what_the_unrounded_speeds_give():
    """The same simulated runs logged twice: speeds rounded to a step uneven against the encoder's count
    step (4096 counts a motor turn; c = 12.78 steps), and as the encoder gives them (a step of 1e-7 m/s).
    With the counts recovered, the rounded logs fit as the unrounded ones do, and both within three
    standard errors of the truth; taken as logged, the uneven staircase moves every force-side
    estimate the same way (the efficiency measured 0.4 % low on a skid-steer over the link)."""
    v, rng, design = identifiable_vehicle(9, duration_s=20)
    count = 2 * np.pi * dynamics.wheel_radius(v) / (v.drive.gear_ratio * 4096) / 0.001  # m/s of one count a period
    v = dataclasses.replace(v, firmware=dataclasses.replace(v.firmware, speed_lsb_mps=count / 12.78))
    fine = dataclasses.replace(v, firmware=dataclasses.replace(v.firmware, speed_lsb_mps=1e-7))
    truth, x_true = changed(v, rng, fp.NAMES[:10])
    coarse_logs, fine_logs = [], []
    for k, c in enumerate(design.logs):
        plan = campaign.plan_for(v, c, duration_s=20, period_s=0.001)
        for model, out in ((v, coarse_logs), (fine, fine_logs)):
            out += run_plan(model, truth, plan, rig=c.rig, feedforward=c.rig == "on-floor", noise_a=0.0, seed=k)
    assert countlattice.count_step(coarse_logs[-1].speed, v.firmware.speed_lsb_mps) is not None
    name = "drive.efficiency"
    unrounded = identify.fit(v, fine_logs).estimates[name]
    fixed = identify.fit(v, coarse_logs).estimates[name]
    keep = countlattice.on_counts
    try:
        countlattice.on_counts = lambda speed, lsb: speed  # the speeds as logged
        plain = identify.fit(v, coarse_logs).estimates[name]
    finally:
        countlattice.on_counts = keep
    true = x_true[fp.INDEX[name]]
    assert abs(unrounded.estimate - true) <= 3 * unrounded.se and abs(fixed.estimate - true) <= 3 * fixed.se
    assert abs(fixed.estimate - unrounded.estimate) <= 0.25 * unrounded.se, (fixed, unrounded)
    assert abs(plain.estimate - unrounded.estimate) > 2 * abs(fixed.estimate - unrounded.estimate), (plain, fixed)


@pytest.mark.parametrize("steps", [2.05, 2.12, 2.249, 2.31, 2.45])
def test_a_count_step_whose_levels_a_smaller_one_also_fits_is_not_mistaken_for_it(steps):
    """c of 2.05-2.5 speed steps: its lowest level is 2, and a c of 0.67-0.95 of it fits the lowest
    levels too with counts left out between (a fresh-eyes review found the smaller one taken, making the
    speeds worse than as logged): the count step and every count come back."""
    lsb = 1e-3
    counts = np.r_[np.arange(0, 81), np.arange(80, -81, -1)]
    reported = np.round(counts * steps) * lsb
    found = countlattice.count_step(reported, lsb)
    assert found is not None and abs(found / lsb - steps) <= 1 / 80
    assert np.array_equal(np.round(countlattice.on_counts(reported, lsb) / found), counts)


def test_long_fine_logs_and_sparse_levels_that_are_no_lattice():
    """A smooth speed at a fine step (200,000 rows, levels from 2 steps up) is checked quickly and left
    alone; a few setpoint-like levels that no one count step gives are left alone."""
    lsb = 1e-5
    smooth = np.round(np.sin(np.linspace(0, 50, 200_000)) * 3.0 / lsb) * lsb
    smooth[np.abs(smooth) < 2 * lsb] = 0.0
    assert countlattice.count_step(smooth, lsb) is None
    sparse = np.repeat(np.array([0.0, 5.0, 11.0, 16.0, 24.0, 29.0]) * lsb, 100)  # 5, 11, 16, 24, 29: no lattice
    assert countlattice.count_step(sparse, lsb) is None
