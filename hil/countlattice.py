"""Measured speeds that are whole encoder counts per period, rounded to the firmware's speed step.

A controller that counts encoder edges each period reports k * c rounded to speed_lsb (c: the rim speed
of one count per period). When c is coarser than the step and not a multiple of it, the rounding makes
the staircase of levels uneven (steps of 13, 13, 12, 13... speed steps for c = 6.39 mm/s and a 0.5 mm/s
step), and a derivative through it sees the unevenness as an error in proportion to the acceleration: an
error in the fit's regressor, which shrinks the inertia estimates and with them the efficiencies
(measured on a simulated bench: -0.4 % for 0.5 mm/s, -3.2 % for 2 mm/s, well outside the error bars).
The levels a log holds pin c down; mapping each level back to its count undoes the rounding. Logs whose
levels are not such a lattice (a finer encoder, a filtered speed) are left as they are."""

from __future__ import annotations

import numpy as np

LEVELS_MIN = 4  # distinct nonzero speed levels needed before a lattice is believed
HEAD = 16  # the lowest levels that choose c; every level then checks it
CANDIDATES = 4001  # trial count steps across one speed step around the lowest level


def count_step(speed: np.ndarray, lsb: float) -> float | None:
    """c, m/s: the count-per-period speed whose multiples, rounded to the nearest lsb, give every nonzero
    |speed| level of the log (the middle of the interval of such c, the lowest level one count); None when
    no c does, or when c is within 1.5 steps (then the rounding is near even and does no harm). Of the c
    the lowest levels allow, the largest is taken: a smaller one fits them too with counts left out
    between (a c of 2.25 steps gives levels 2, 4, 7, 9 ...; 1.8 fits those as counts 1, 2, 4, 5)."""
    levels = np.unique(np.round(np.abs(speed[np.isfinite(speed)]) / lsb))
    levels = levels[levels > 0]
    if len(levels) < LEVELS_MIN or levels[0] < 1.5:
        return None
    head = levels[:HEAD]
    trial = np.linspace(levels[0] - 0.5, levels[0] + 0.5, CANDIDATES)[:, None]  # c in steps
    counts = np.round(head / trial)
    fits = np.all(np.abs(counts * trial - head) <= 0.5, axis=1) & (counts[:, 0] == 1)
    fits &= np.all(np.diff(counts, axis=1) > 0, axis=1)
    if not fits.any():
        return None
    c = _through(levels, float(trial[np.flatnonzero(fits)[-1], 0]))  # from the largest c they allow
    return None if c is None else c * lsb


def _through(levels: np.ndarray, start: float) -> float | None:
    """c in steps that gives every level, counting each at the largest c the levels below it allow
    (starting at `start`); None when the levels leave no c."""
    lo, hi, last = 0.0, start, 0
    for level in levels:  # |k c - L| <= 1/2 for every level L with its count k
        k = round(level / hi)
        if k <= last:
            return None
        lo, hi, last = max(lo, (level - 0.5) / k), min(hi, (level + 0.5) / k), k
        if lo > hi:
            return None
    return (lo + hi) / 2


def on_counts(speed: np.ndarray, lsb: float) -> np.ndarray:
    """The speeds with each level replaced by its whole number of counts times c (count_step), or the
    speeds as they are when they are not such a lattice."""
    c = count_step(speed, lsb)
    if c is None:
        return speed
    return np.sign(speed) * np.round(np.abs(speed) / c) * c
