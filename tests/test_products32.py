"""Products kept in 32 bits: the exact two-part form against Python's exact integers, operand rounding
that fits, an int32 model whose compiled Cortex-M0+ code calls no 64-bit multiply helper, and the exact
fallback when rounded operands cannot meet the budget (its helper calls are then named in the report)."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from kinetab.generator import emulate, fixedpoint, interface, ops, program, render, synthesis, vectors

from tests import cortexm
from tests.csteps import build_harness, needs_gcc, run_harness, write_files
from tests.firmware_fixtures import demo_firmware
from tests.helpers import invented

INT32 = fixedpoint.Interval(fixedpoint.word_min(32), fixedpoint.word_max(32))
HELPERS = ("__aeabi_lmul", "__muldi3")  # the 64-bit multiply of the Arm EABI run-time (gcc) and compiler-rt (zig)


def _c_two_part(x: int, y: int, s: int) -> int:
    """(x >> s) * y + (((x & (2^s - 1)) * y + half) >> s), every intermediate checked to fit int32 as C needs."""
    parts = [x >> s, (x >> s) * y, x & ((1 << s) - 1), (x & ((1 << s) - 1)) * y + (1 << (s - 1))]
    assert all(INT32.lo <= p <= INT32.hi for p in parts), parts
    return parts[1] + (parts[3] >> s)


@given(
    x=st.tuples(st.integers(-(2**31), 2**31 - 1), st.integers(-(2**31), 2**31 - 1)).map(sorted),
    y=st.tuples(st.integers(-(2**20), 2**20), st.integers(-(2**20), 2**20)).map(sorted),
    s=st.integers(1, 31),
    data=st.data(),
)
def test_two_part_product_equals_the_rounded_product_whenever_it_is_chosen(x, y, s, data):
    """Exact integers (Python) as the reference: round(x*y/2^s) with ties up is floor((x*y + 2^(s-1)) / 2^s)."""
    rx, ry = fixedpoint.Interval(*x), fixedpoint.Interval(*y)
    if not ops.split_fits(rx, ry, s):
        return
    for _ in range(20):
        a = data.draw(st.integers(rx.lo, rx.hi))
        b = data.draw(st.integers(ry.lo, ry.hi))
        assert _c_two_part(a, b, s) == (a * b + (1 << (s - 1))) // (1 << s)


@given(a=st.integers(1, 2**31 - 1), b=st.integers(1, 2**31 - 1), shift=st.integers(0, 40))
def test_operand_rounding_fits_with_the_least_added_error(a, b, shift):
    """Against a brute force over every pair (pa, pb) with pa + pb <= shift: the chosen pair makes the
    product (plus the rounding half) fit int32 and adds no more error, |b| 2^(pa-1) + |a| 2^(pb-1), than
    any other pair that fits; (0, 0) when none fits."""
    ra, rb = fixedpoint.Interval(-a, a), fixedpoint.Interval(-b, b)

    def fits(pa: int, pb: int) -> bool:
        prod = ra.shift_round(pa) * rb.shift_round(pb)
        return prod.lo >= INT32.lo and prod.hi + ops.rounding_half(shift - pa - pb) <= INT32.hi

    def cost(pa: int, pb: int) -> int:
        return b * ops.rounding_half(pa) + a * ops.rounding_half(pb)

    feasible = [(i, j) for i in range(shift + 1) for j in range(shift + 1 - i) if fits(i, j)]
    pa, pb = program._preshift(ra, rb, shift)
    if not feasible:
        assert (pa, pb) == (0, 0)
    else:
        assert fits(pa, pb) and cost(pa, pb) == min(cost(i, j) for i, j in feasible)


def _int32_twin(budget_a: float | None = None) -> synthesis.Firmware:
    v = demo_firmware().vehicle
    fw = dataclasses.replace(v.firmware, word="int32")
    if budget_a is not None:
        fw = dataclasses.replace(fw, current_budget_a=budget_a)
    return synthesis.synthesise(dataclasses.replace(v, firmware=fw))


def test_int32_model_needs_no_64bit_product():
    fw = _int32_twin()
    assert not fw.design.exact and fw.products64() == [] and fw.ff_bound_a <= fw.vehicle.firmware.current_budget_a
    assert synthesis.products_note(fw) == "no 64-bit multiplies"


def test_budget_out_of_reach_of_rounded_operands_keeps_full_precision_and_says_why():
    """The demo's int32 twin at 1 mA: rounded operands reach 1.37 mA at best, full precision 0.50 mA."""
    assert synthesis.best_bound_a(_int32_twin().vehicle, exact=False) > 0.001
    fw = _int32_twin(0.001)
    assert fw.design.exact and fw.ff_bound_a <= 0.001
    note = synthesis.products_note(fw)
    assert note.startswith(f"{len(fw.products64())} 64-bit multiplies (g_pitch, ")
    assert f"best bound is {fw.rounded_best_a * 1000:.3f} mA" in note and fw.rounded_best_a > 0.001


@needs_gcc
@pytest.mark.parametrize("budget_a", [None, 0.001])
def test_int32_c_equals_emulation_in_both_designs(budget_a, tmp_path):
    """The two-part and 64-bit forms printed as C compute the emulator's integers (gcc, strict flags)."""
    fw = _int32_twin(budget_a)
    folder = write_files(tmp_path, render.render(fw))
    rows = vectors.feedforward_table(fw, 4000)
    n = len(interface.FF_IN.columns)
    assert np.array_equal(run_harness(build_harness(folder, fw.vehicle.name), rows[:, :n]), rows[:, n:])
    inp = interface.rows_to_fields(interface.FF_IN, rows[:, :n])
    assert np.array_equal(emulate.run(fw.design.feedforward, fw.tables, inp)["current"], rows[:, n : n + 2])


def _helpers_called(fw: synthesis.Firmware, compiler: str, tmp_path) -> set[str]:
    from elftools.elf.elffile import ELFFile
    from elftools.elf.sections import SymbolTableSection

    folder = write_files(tmp_path, render.render(fw))
    build = cortexm.compile_elf if compiler == "zig" else cortexm.compile_elf_gcc
    name = fw.vehicle.name
    elf = build([folder / f"{name}_ff.c"], "cortex_m0plus", f"{name}_feedforward", tmp_path / "ff.elf")
    with elf.open("rb") as fh:
        symbols = {
            sym.name
            for section in ELFFile(fh).iter_sections()
            if isinstance(section, SymbolTableSection)
            for sym in section.iter_symbols()
        }
    return symbols & set(HELPERS)


COMPILERS = [
    pytest.param("zig", marks=pytest.mark.skipif(not cortexm.zig_available(), reason="pip install ziglang")),
    pytest.param(
        "gcc", marks=pytest.mark.skipif(not cortexm.arm_gcc_available(), reason="apt install gcc-arm-none-eabi")
    ),
]


@pytest.mark.slow
@pytest.mark.parametrize("compiler", COMPILERS)
def test_compiled_int32_feedforward_calls_no_64bit_helper_on_cortex_m0plus(compiler, tmp_path):
    """The compiler's own output is the judge: its symbol table names every run-time helper linked in.
    The full-precision design is the control: there the helper must appear, or the check proves nothing."""
    assert _helpers_called(_int32_twin(), compiler, tmp_path / "rounded") == set()
    assert _helpers_called(_int32_twin(0.001), compiler, tmp_path / "exact") != set()


@given(
    e0=st.one_of(st.integers(-(2**15), 2**15 - 1), st.integers(-(2**31), 2**31 - 1)),
    e1=st.one_of(st.integers(-(2**15), 2**15 - 1), st.integers(-(2**31), 2**31 - 1)),
    shift=st.integers(1, 16),
    data=st.data(),
)
def test_folded_one_segment_equals_the_interpolation_whenever_it_is_chosen(e0, e1, shift, data):
    """((e1 - e0) d + e0 2^s + half) >> s against e0 + (((e1 - e0) d + half) >> s), exact integers;
    the folded sum must fit int32 for every d the piece can see (0 .. 2^s - 1)."""
    from kinetab.generator import analysis
    from kinetab.generator import tables as tb

    piece = tb.PieceData(1, shift, np.array([e0, e1], dtype=np.int64))
    folded = analysis.folded_segment(piece)
    if folded is None:
        return
    step, const = folded
    for d in (0, (1 << shift) - 1, data.draw(st.integers(0, (1 << shift) - 1))):
        total = step * d + const
        assert INT32.lo <= total <= INT32.hi
        assert total >> shift == e0 + ((step * d + (1 << (shift - 1))) >> shift)
        assert total >> shift == int(tb.lookup_piece(piece, 0, np.array([d]))[0])


def _reads_only_through_shifts(des: program.Design) -> list[str]:
    """Tables whose every lookup is read only through a rounding shift (bits stored to be rounded away)."""
    all_ops = [*des.feedforward.ops, *des.forward.ops]
    out = set()
    for op in all_ops:
        if ops.looked_up(op) is None:
            continue
        readers = [r for r in all_ops if op.dst in ops.op_inputs(r)]
        if readers and all(ops.pre_shift(r) > 0 for r in readers):
            out.add(ops.looked_up(op))
    return sorted(t for t in out if t is not None)


@pytest.mark.parametrize("seed", [11, 23, 37])
def test_coarse_int32_tables_never_cost_a_buildable_budget(seed):
    """int32 tables store no fraction bits their uses round away first (fewer shifts per call: the
    int32 twin of the demo went from 213 to about 165 M0+ instructions). That is only taken where it
    meets the budget within table_bytes_max: at every budget the full-precision tables meet, the vehicle
    still builds, within its budget, never with more 64-bit products than the tables at full precision
    unless those take more than table_bytes_max and the exact design fits it (the cap comes first)."""
    _, fw16 = invented(seed, "veh", lambda doc, _rng: doc["firmware"].update(word="int32"))
    v = fw16.vehicle
    fine_best = synthesis.best_bound_a(v, exact=False)
    for budget in (60e-3, 4 * fine_best, 1.02 * fine_best):
        w = dataclasses.replace(v, firmware=dataclasses.replace(v.firmware, current_budget_a=budget))
        fw = synthesis.synthesise(w)
        assert fw.ff_bound_a <= budget, budget
        if fw.design.coarse:
            assert not fw.over_cap and _reads_only_through_shifts(fw.design) == []
        fine = program.design(w, coarse=False)
        assert not fine.exact
        if fw.design.exact:  # only where the full-precision tables take more than table_bytes_max
            assert not fw.over_cap and synthesis._synthesise(w, fine, explain=False).over_cap, budget
        else:
            assert len(fw.products64()) == 0
    coarse = program.design(v)
    assert coarse.coarse and _reads_only_through_shifts(program.design(v, coarse=False)) != []
