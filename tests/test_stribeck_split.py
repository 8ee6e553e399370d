"""The friction table split at the Stribeck edge: where the dip of the published static friction map has
fallen to a small share of the budget, friction is Coulomb plus viscous, an affine tail one table segment
holds. Checked on invented vehicles (random within the test strategy's ranges), never the demo alone.

Sources: the static friction map F(v) = F_C + (F_S - F_C) exp(-(v/v_s)^2) + sigma_2 v, Canudas de Wit,
Olsson, Astrom, Lischinsky (1995), IEEE TAC 40(3), and the survey of Armstrong-Helouvry, Dupont, Canudas
de Wit (1994) [memory for details]; motor current per rim force r / (i eta k_t) (torque constant, gear
ratio and efficiency: common practice).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from kinetab.generator import accuracy, interface, synthesis, tablespecs, vectors
from kinetab.generator import tables as tb

from tests.csteps import assert_host_c_within_bound, needs_gcc
from tests.helpers import invented, vehicle_from

SPLIT_SEEDS = (1, 10, 11, 40)
"""Invented vehicles (helpers.invented) whose Stribeck dip ends inside the envelope and whose split fits."""


def _amps_per_newton(v) -> float:
    """Motor current per rim force when motoring: r / (i eta k_t), one motor a side (common practice)."""
    d = v.drive
    return v.wheels.diameter_m / 2 / (d.gear_ratio * d.efficiency * d.torque_constant_nm_per_a)


def _dip_amps(v, steps: np.ndarray) -> np.ndarray:
    """The Stribeck dip (F_S - F_C) exp(-(v/v_s)^2) as motor current at |u| = steps speed steps."""
    f = v.friction
    u = np.asarray(steps, float) * v.firmware.speed_lsb_mps
    return np.abs(f.breakaway_n - f.coulomb_n) * np.exp(-((u / f.stribeck_speed_mps) ** 2)) * _amps_per_newton(v)


@pytest.mark.parametrize("seed", SPLIT_SEEDS)
def test_the_edge_is_where_the_dip_falls_to_a_thirty_second_of_the_budget(seed):
    """The first piece ends at the last step where the dip, as current, exceeds budget/32; the next step's
    dip is within it. Both sides of the edge are checked with the formula written here."""
    fw = invented(seed, "veh")[1]
    v, lim = fw.vehicle, fw.design.limits
    assert fw.design.stribeck
    edge = fw.tables["friction"].spec.pieces[0].x1
    share = v.firmware.current_budget_a / 32
    assert lim.deadband < edge < lim.speed
    assert _dip_amps(v, np.array([edge]))[0] > share >= _dip_amps(v, np.array([edge + 1]))[0]
    assert fw.tables["shape"].spec.pieces[0].x1 == edge  # friction and shape share the piece choice


@pytest.mark.parametrize("seed", SPLIT_SEEDS)
def test_beyond_the_edge_the_table_holds_coulomb_plus_viscous(seed):
    """Every tail input: the stored table, in newtons, against F_C + sigma_2 u, within the piece's proven
    error plus the dip left at the edge; the tail is one segment or a constant (two entries at most)."""
    fw = invented(seed, "veh")[1]
    v, table = fw.vehicle, fw.tables["friction"]
    spec, tail = table.spec, table.pieces[1]
    assert tail.kind in (tb.PieceKind.ONE_SEGMENT, tb.PieceKind.CONSTANT)
    x = np.arange(spec.pieces[1].x0, spec.pieces[1].x1 + 1)
    newtons = tb.lookup(table, x) * 2.0**-spec.frac_bits * spec.si_scale
    affine = v.friction.coulomb_n + v.friction.viscous_ns_per_m * x * v.firmware.speed_lsb_mps
    dip_n = _dip_amps(v, x[:1])[0] / _amps_per_newton(v)
    allowed = fw.errors["friction"][1].total * spec.si_scale + dip_n + 1e-9
    assert np.max(np.abs(newtons - affine)) <= allowed
    negative = tb.lookup(table, -x) * 2.0**-spec.frac_bits * spec.si_scale
    assert np.array_equal(negative, -newtons)  # odd in speed


def test_the_split_is_taken_only_where_it_costs_fewer_lookup_instructions_and_fits():
    """On twelve invented vehicles: the chosen firmware never costs more (the sizing's cost model) than
    the design without the split, it fits firmware.table_bytes_max, and a split's edge lies beyond the
    deadband edge."""
    taken = 0
    for seed in range(1, 13):
        fw = invented(seed, "veh")[1]
        plain = synthesis._plain(fw.vehicle, flat=fw.design.flat)
        assert (fw.instructions, fw.total_bytes) <= (plain.instructions, plain.total_bytes)
        assert fw.total_bytes <= fw.vehicle.firmware.table_bytes_max or fw.over_cap
        if fw.design.stribeck:
            taken += 1
            assert fw.tables["friction"].spec.pieces[0].x1 > fw.design.limits.deadband
        else:
            assert fw.tables["friction"].spec.pieces[0].x1 == fw.design.limits.deadband
    assert 0 < taken < 12  # both outcomes occur in this set


@pytest.mark.parametrize("seed", [31, 36, 40])
def test_the_layout_is_what_sizing_both_designs_and_comparing_them_gives(seed):
    """The plain design is sized only below the split's instructions (a ceiling that prunes its search);
    the outcome equals sizing both in full and taking fewer instructions, then fewer bytes. Seeds 31 and
    36: a shortcut that kept a lean split without sizing the plain design once chose the dearer one."""
    v = invented(seed, "veh")[1].vehicle
    for flat in (False, True):
        split = synthesis._split(v, flat=flat)
        assert split is not None
        plain = synthesis._plain(v, flat=flat)
        want = split if (split.instructions, split.total_bytes) < (plain.instructions, plain.total_bytes) else plain
        got = synthesis._layout(v, flat=flat)
        assert (got.design.stribeck, got.instructions, got.total_bytes) == (
            want.design.stribeck,
            want.instructions,
            want.total_bytes,
        )


def test_no_split_without_room_or_without_a_dip_or_when_sizing_for_bytes():
    """A byte cap too small for any design (the fewest bytes then, flagged), a map with no dip (F_S = F_C),
    and sizing for bytes each leave the tables split at the deadband edge."""
    assert invented(10, "veh")[1].design.stribeck

    def tiny(d, _rng):
        d["firmware"]["table_bytes_max"] = 64

    def flat(d, _rng):
        d["friction"]["breakaway"] = d["friction"]["coulomb"]

    def for_bytes(d, _rng):
        d["firmware"]["sizing"] = "bytes"

    for tweak in (tiny, flat, for_bytes):
        fw = invented(10, "veh", tweak)[1]
        assert not fw.design.stribeck
        assert fw.tables["friction"].spec.pieces[0].x1 == fw.design.limits.deadband
        assert fw.over_cap == (tweak is tiny)


def test_the_edge_is_solved_not_searched_on_a_two_to_the_thirty_step_speed_range():
    """A speed step so fine that the envelope spans about 2^30 steps: the edge is still found (and the
    dip formula agrees on both sides of it) without one array element per step."""
    doc = invented(10, "veh")[0]
    top = float(doc["envelope"]["speed_max"].split()[0])
    doc["firmware"]["speed_lsb"] = f"{top / (2**30 - 1.5)!r} m/s"
    v = vehicle_from(doc)
    lim = tablespecs.limits_of(v)
    acc = v.firmware.current_lsb_a / 4096
    edge = tablespecs.friction_edge(v, lim, acc)
    share = v.firmware.current_budget_a / 32
    assert lim.speed > 2**29 and edge > lim.deadband
    assert _dip_amps(v, np.array([edge]))[0] > share >= _dip_amps(v, np.array([edge + 1]))[0]
    reach = v.friction.stribeck_speed_mps * math.sqrt(math.log(_dip_amps(v, np.array([0]))[0] / share))
    assert abs(edge * v.firmware.speed_lsb_mps - reach) <= 2 * v.firmware.speed_lsb_mps


def _shaped(seed: int, shape: str) -> synthesis.Firmware:
    """An invented vehicle with the given deadband shape."""
    return invented(seed, "veh", lambda d, _r: d["friction"].update(deadband_shape=shape))[1]


@needs_gcc
@pytest.mark.parametrize("shape", ["ramp", "gap"])
def test_the_split_c_is_bit_exact_and_within_its_proven_bound_around_both_edges(shape, tmp_path):
    """Host gcc (strict flags) against the emulator, and the emulator against the float model within the
    proven bound, on inputs whose speeds sit at the deadband edge, the Stribeck edge and either side."""
    fw = next(f for f in (_shaped(s, shape) for s in range(1, 40)) if f.design.stribeck)
    lim, edge = fw.design.limits, fw.tables["friction"].spec.pieces[0].x1
    inp = accuracy.envelope_points(fw, 2000, 5)
    near = np.array([lim.deadband, lim.deadband + 1, edge - 1, edge, edge + 1, edge + 2])
    rng = np.random.default_rng(edge)
    speeds = rng.choice(np.concatenate([near, -near]), size=inp["speed"].shape)
    inp["speed"] = np.minimum(np.abs(speeds), lim.speed) * np.sign(speeds)
    rows = interface.fields_to_rows(interface.FF_IN, inp)
    rows = rows[accuracy.inside_envelope(fw.vehicle, lim, rows)]
    assert len(rows) > 500
    assert_host_c_within_bound(fw, interface.rows_to_fields(interface.FF_IN, rows), tmp_path)


def test_the_golden_vectors_sit_on_either_side_of_the_stribeck_edge_on_both_wheels():
    """The golden vectors' fixed rows held the deadband's edges only; a split design's firmware tests
    (and `verify`) now also see each wheel one step before, at and after the Stribeck edge, both signs."""
    fw = next(f for f in (invented(s, "veh")[1] for s in SPLIT_SEEDS) if f.design.stribeck)
    edge = fw.tables["friction"].spec.pieces[0].x1
    assert edge in vectors.speed_edges(fw.design)
    speed = [interface.FF_IN.columns.index(c) for c in interface.FF_IN.member("speed").columns]
    rows = vectors.feedforward_table(fw, 0)[:, speed]
    for value in (edge - 1, edge, edge + 1, -edge - 1, -edge, -edge + 1):
        for wheel in (0, 1):
            assert np.any(rows[:, wheel] == value), (value, wheel)
