"""Integer primitives against a general-purpose fixed-point library (apytypes, PyPI) and conventions."""

from __future__ import annotations

import apytypes as apy
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from kinetab.generator import emulate
from kinetab.generator import fixedpoint as fx
from kinetab.generator import tables as tb

from tests.firmware_fixtures import demo_firmware


def _apy_quantise(value: float, frac_bits: int, bits: int) -> int:
    """Round to nearest, ties toward +inf (QuantizationMode.TIES_POS), saturate (OverflowMode.SAT)."""
    wide = apy.APyFixed.from_float(value, int_bits=80, frac_bits=90)
    out = wide.cast(
        int_bits=bits - frac_bits,
        frac_bits=frac_bits,
        quantization=apy.QuantizationMode.TIES_POS,
        overflow=apy.OverflowMode.SAT,
    )
    return int(float(out) * 2.0**frac_bits)


@settings(max_examples=400, deadline=None)
@given(value=st.floats(-1e6, 1e6, allow_nan=False), frac_bits=st.integers(-4, 20), bits=st.sampled_from([16, 32]))
def test_quantise_matches_apytypes_ties_up_and_saturation(value, frac_bits, bits):
    ours, sat = fx.quantise(np.array([value]), frac_bits, bits)
    assert int(ours[0]) == _apy_quantise(value, frac_bits, bits)
    assert bool(sat[0]) == (abs(np.floor(value * 2.0**frac_bits + 0.5)) > fx.word_max(bits) + (value < 0))


@settings(max_examples=400, deadline=None)
@given(x=st.integers(-(2**40), 2**40), shift=st.integers(1, 30))
def test_shift_round_matches_apytypes(x, shift):
    """(x + 2^(s-1)) >> s is round-to-nearest with ties toward +infinity (apytypes TIES_POS)."""
    fixed = apy.APyFixed.from_float(x / 2.0**shift, int_bits=60, frac_bits=shift)
    ref = fixed.cast(int_bits=60, frac_bits=0, quantization=apy.QuantizationMode.TIES_POS)
    assert fx.shift_round(x, shift) == int(float(ref))


def test_ties_go_up_not_to_even():
    """Half-way cases: 2.5 -> 3 and -2.5 -> -2 (ties toward +inf), unlike numpy's round-half-even."""
    ints, _ = fx.quantise(np.array([2.5, -2.5, 3.5]), 0, 16)
    assert ints.tolist() == [3, -2, 4]
    assert np.round(2.5) == 2.0  # the convention we deliberately do not use


def test_q_format_keeps_the_largest_value_inside_the_word():
    """Q notation (TI): Qm.n leaves the sign bit out of m; Q15 = 16-bit word (TI convention)."""
    assert fx.q_name(15, 16) == "Q0.15"
    assert fx.frac_bits_for(0.99, 16) == 15
    assert fx.frac_bits_for(1.0, 16) == 14  # 1.0 * 2^15 = 32768 does not fit
    n = fx.frac_bits_for(123.4, 16)
    assert 123.4 * 2**n <= 32767 < 123.4 * 2 ** (n + 1)


def test_clamping_follows_the_cmsis_dsp_convention():
    """Out-of-range inputs give the end entries (CMSIS-DSP linear interpolation clamps)
    and set the input's bit in `clamped`."""
    fw = demo_firmware()
    lim = fw.design.limits
    edge = {
        "speed": np.array([[lim.speed, -lim.speed]]),
        "accel": np.array([[lim.accel, -lim.accel]]),
        "pitch": np.array([lim.pitch]),
        "roll": np.array([-lim.roll]),
        "payload": np.array([lim.payload]),
    }
    beyond = {
        "speed": np.array([[lim.speed + 7, -(2**31)]]),
        "accel": np.array([[2**31 - 1, -lim.accel - 1]]),
        "pitch": np.array([lim.pitch + 1]),
        "roll": np.array([-lim.roll - 100]),
        "payload": np.array([lim.payload + 5]),
    }
    a = emulate.run(fw.design.feedforward, fw.tables, edge)
    b = emulate.run(fw.design.feedforward, fw.tables, beyond)
    assert a["current"].tolist() == b["current"].tolist()
    assert int(a["clamped"][0]) == 0 and int(b["clamped"][0]) == 0x7F
    neg = dict(edge, payload=np.array([-1]))
    assert int(emulate.run(fw.design.feedforward, fw.tables, neg)["clamped"][0]) == 1 << 6


def test_stored_values_within_half_an_lsb():
    """Round-to-nearest quantisation error <= 1/2 LSB (Oppenheim & Schafer [memory])."""
    fw = demo_firmware()
    for name, table in fw.tables.items():
        for piece, data in zip(table.spec.pieces, table.pieces):
            if data.segments == 0:
                continue
            xs = piece.x0 + (np.arange(data.segments + 1, dtype=np.int64) << data.shift)
            exact = piece.func(xs) * 2.0**table.spec.frac_bits
            assert np.max(np.abs(data.entries - exact)) <= 0.5 + 1e-9, name


def _second_derivative_max(piece: tb.Piece, data: tb.PieceData) -> float:
    """max |f''| over the span the segments cover, by central differences on a fine grid (steps^-2)."""
    hi = piece.x0 + (data.segments << data.shift)
    xs = np.linspace(piece.x0, hi, 20001)
    h = xs[1] - xs[0]
    f = piece.func(xs)
    return float(np.max(np.abs(f[2:] - 2 * f[1:-1] + f[:-2]))) / h**2 if len(xs) > 2 else 0.0


def test_interpolation_error_within_burden_faires_bound():
    """|f - p| <= h^2/8 max|f''| on each segment (Burden & Faires, Numerical Analysis §3.1), plus the
    rounding terms: 1/2 LSB stored value + 1/2 LSB interpolation rounding."""
    fw = demo_firmware()
    for name, table in fw.tables.items():
        lsb = 2.0**-table.spec.frac_bits
        for piece, data, err in zip(table.spec.pieces, table.pieces, fw.errors[name]):
            if data.segments == 0:
                continue
            h = float(1 << data.shift)
            bound = h * h / 8 * _second_derivative_max(piece, data) * 1.001 + lsb
            held = piece.slack  # a folded cosine's reach, added to the measured error (test_program checks it)
            assert err.interpolation - held <= h * h / 8 * _second_derivative_max(piece, data) * 1.001 + 1e-12, name
            assert err.total - held <= bound + 1e-12, (name, err.total, bound)


def test_every_table_uses_power_of_two_segments_and_shift_indexing():
    """Interpolated pieces: power-of-two segments, indexed by shift; direct pieces (one entry per input
    step, shift 0) hold exactly span + 1 segments."""
    fw = demo_firmware()
    kinds = set()
    for table in fw.tables.values():
        for piece, data in zip(table.spec.pieces, table.pieces):
            if data.segments and data.shift:
                assert data.segments & (data.segments - 1) == 0
                kinds.add("interpolated")
            elif data.segments:
                assert data.segments == piece.span + 1
                kinds.add("direct")
            if data.segments:
                assert (piece.span >> data.shift) < data.segments  # the last index stays inside
    assert kinds == {"interpolated", "direct"}


def test_constant_piece_error_is_half_the_range():
    fw = demo_firmware()
    spec = fw.tables["friction"].spec
    piece = spec.pieces[1]
    data = tb.build_piece(spec, piece, 0)
    vals = piece.func(np.arange(piece.x0, piece.x1 + 1))
    err = tb.piece_error(spec, piece, data)
    assert err.total == pytest.approx((vals.max() - vals.min()) / 2, abs=2.0**-spec.frac_bits)


def test_q_name_outside_q_notation():
    assert fx.q_name(-14, 16) == "int16 x 2^14"  # large values: step of 2^14
    assert fx.q_name(17, 16) == "int16 x 2^-17"  # values below 0.25: all bits fractional and more
    assert fx.q_name(30, 32) == "Q1.30"
