"""Cosines folded into the payload tables: over a small envelope cos(pitch) and cos(pitch) cos(roll) are
held at their midranges, the most they stray counted in the tables' errors. Checked on invented vehicles
(random within the test strategy's ranges) and an invented skid-steer, against the float model with the
true cosines.

Sources: the best constant approximation of a continuous function on an interval in the max norm is the
midrange of its values, its error half their range (Chebyshev equioscillation, degree 0; e.g. Burden &
Faires, Numerical Analysis, ch. 8 [memory]); cos falling on [0, pi/2] (common practice).
"""

from __future__ import annotations

import numpy as np
import pytest
from kinetab.generator import accuracy, interface, synthesis, tablespecs
from kinetab.generator import tables as tb
from kinetab.generator.errors import CheckFailed

from tests.csteps import assert_host_c_within_bound, needs_gcc
from tests.helpers import invented, vehicle_from
from tests.test_skid import _skid_firmware


@pytest.mark.parametrize("seed", [1, 7, 10])
def test_the_held_values_are_the_minimax_constants_of_the_cosines_over_the_envelope(seed):
    """Every envelope step: |cos(pitch) - c_p| and |cos(pitch) cos(roll) - c_pr| within the stated reach,
    which is reached at both ends (no other constant does better: equioscillation)."""
    fw = invented(seed, "veh")[1]
    v, lim = fw.vehicle, fw.design.limits
    (c_p, d_p), (c_pr, d_pr) = tablespecs.flat_cosines(v, lim)
    ang = v.firmware.angle_lsb_rad
    pitch = np.arange(-lim.pitch, lim.pitch + 1) * ang
    roll = np.arange(-lim.roll, lim.roll + 1) * ang
    both = np.cos(pitch)[:, None] * np.cos(roll)[None, :]
    assert np.max(np.abs(np.cos(pitch) - c_p)) == pytest.approx(d_p, rel=1e-12)
    assert np.max(np.abs(both - c_pr)) == pytest.approx(d_pr, rel=1e-12)
    assert np.cos(0.0) - c_p == pytest.approx(c_p - np.cos(lim.pitch * ang), rel=1e-12)  # both ends reach it
    assert 1.0 - c_pr == pytest.approx(c_pr - np.min(both), rel=1e-12)


def _extreme_angles(fw: synthesis.Firmware, inp: dict[str, np.ndarray], seed: int) -> dict[str, np.ndarray]:
    """Half the points moved to the envelope's pitch and roll corners, where a held cosine errs most."""
    lim, rng = fw.design.limits, np.random.default_rng(seed)
    n = len(inp["pitch"])
    corner = rng.random(n) < 0.5
    inp = dict(inp)
    inp["pitch"] = np.where(corner, rng.choice([-lim.pitch, lim.pitch], n), inp["pitch"])
    inp["roll"] = np.where(corner, rng.choice([-lim.roll, lim.roll], n), inp["roll"])
    rows = interface.fields_to_rows(interface.FF_IN, inp)
    return interface.rows_to_fields(interface.FF_IN, rows[accuracy.inside_envelope(fw.vehicle, lim, rows)])


@needs_gcc
@pytest.mark.parametrize("which", ["seed 1", "seed 8", "skid-steer"])
def test_folded_c_is_bit_exact_and_within_its_proven_bound_of_the_true_cosines(which, tmp_path):
    """Host gcc (strict flags) against the emulator; the emulator against the float model (true cosines)
    within the proven bound, half the points at the pitch and roll corners."""
    fw = _skid_firmware(53, 3) if which == "skid-steer" else invented(int(which.split()[1]), "veh")[1]
    assert fw.design.flat and "cos_pitch" not in fw.tables and "cos_roll" not in fw.tables
    inp = _extreme_angles(fw, accuracy.envelope_points(fw, 3000, 9), 9)
    assert_host_c_within_bound(fw, inp, tmp_path)


def test_the_fold_is_taken_only_where_it_costs_no_more_lookup_instructions_and_fits():
    """Twelve invented vehicles: the chosen firmware never costs more lookup instructions (the sizing's
    cost model) than the layout that looks the cosines up, a folded one fits the byte cap, and both
    outcomes occur."""
    folded = 0
    for seed in range(1, 13):
        fw = invented(seed, "veh")[1]
        if fw.design.flat:
            folded += 1
            other = synthesis._layout(fw.vehicle, flat=False)
            assert fw.instructions <= other.instructions and not fw.over_cap
            continue
        try:
            other = synthesis._layout(fw.vehicle, flat=True)
        except CheckFailed:  # the held cosines' reach alone misses the budget
            continue
        assert other.over_cap or other.instructions > fw.instructions
    assert 0 < folded < 12


def test_sizing_for_bytes_looks_the_cosines_up():
    """The fold is tried only when sizing minimises instructions."""
    fw = invented(1, "veh", lambda d, _r: d["firmware"].update(sizing="bytes"))[1]
    assert not fw.design.flat and "cos_pitch" in fw.tables


@pytest.mark.parametrize("seed", [1, 7])
def test_a_byte_cap_only_the_folded_layout_fits_takes_it(seed):
    """A table_bytes_max at the folded layout's fewest bytes, below the other's: the folded one is chosen
    and fits (found in review: the layout over the cap was kept because it had fewer instructions)."""
    doc = invented(seed, "veh")[0]
    doc["firmware"]["table_bytes_max"] = 1
    v = vehicle_from(doc)
    looked_up, folded = synthesis._layout(v, flat=False), synthesis._layout(v, flat=True)
    assert looked_up.over_cap and folded.over_cap and folded.total_bytes < looked_up.total_bytes
    assert synthesis.synthesise(v).design.flat  # both over: the fewer bytes
    doc["firmware"]["table_bytes_max"] = folded.total_bytes
    fw = synthesis.synthesise(vehicle_from(doc))
    assert fw.design.flat and not fw.over_cap and fw.total_bytes <= folded.total_bytes


def test_the_largest_value_of_a_folded_table_is_found_without_one_element_per_payload_step():
    """A payload of 2^30 steps (found in review: every step was evaluated, 7.5 GiB): the peak of an affine
    function is its larger end plus at most the sampling margin, and of a bump between samples it is not
    under-counted."""
    affine = tb.Piece(x0=0, x1=2**30, func=lambda x: 3.0 - 5e-9 * np.asarray(x, float))
    assert 3.0 <= tablespecs._peak(affine) <= 3.0 + 2 * 5e-9 * 2**30 / 2**20  # |f(0)| = 3 > |f(2^30)| = 2.37
    bump = tb.Piece(x0=0, x1=2**30, func=lambda x: np.sin(np.asarray(x, float) * 1e-6))
    assert tablespecs._peak(bump) >= 1.0 - 1e-12
