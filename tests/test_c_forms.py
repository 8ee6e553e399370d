"""The C forms the generator picks for fewer instructions on Cortex-M0+, each held to the same integers
as the plain form: the rounding shift that needs no wide constant, a product made inside its lookup
block (the rolling term folded where the shape is constant), both table entries from one address."""

from __future__ import annotations

import subprocess

import numpy as np
import pytest
from kinetab.generator import cview, emulate, hostc, interface, opview, render, vectors
from kinetab.generator.ops import Sum

from tests.csteps import harness_source, needs_gcc, run_harness, write_files
from tests.firmware_fixtures import demo_firmware
from tests.helpers import invented

THUMB1 = "__ARM_ARCH_6M__"
"""The predefined macro of ARMv6-M (Cortex-M0/M0+) in gcc and clang: the generated C keys its
Thumb-1 rounding form on it (ACLE, "Architecture feature macros"; common practice)."""


def _int32_samples(rng: np.random.Generator) -> np.ndarray:
    """Every power-of-two edge of int32 and its neighbours, plus uniform random values."""
    edges = [v + d for k in range(32) for v in (1 << k, -(1 << k)) for d in (-1, 0, 1)]
    edges += [2**31 - 1, -(2**31)]
    values = np.array(edges + list(rng.integers(-(2**31), 2**31, 20_000)), dtype=np.int64)
    return values[(values >= -(2**31)) & (values < 2**31)]


def test_rounding_shift_without_the_half_is_round_half_up_for_every_int32():
    """((x >> (s-1)) + 1) >> 1 against the definition of rounding half up, floor(x / 2^s + 1/2), in
    exact integers (Python's unbounded ints and floor division), for every shift the macro takes."""
    xs = _int32_samples(np.random.default_rng(11))
    exact = [int(x) for x in xs]
    for s in range(opview.LONG_SHIFT, 31):
        got = ((xs >> (s - 1)) + 1) >> 1  # int64 holds every int32 intermediate: no wrap to model
        want = np.array([(x + (1 << (s - 1))) // (1 << s) for x in exact], dtype=np.int64)
        assert np.array_equal(got, want), s


def _harness(folder, prefix: str, defines: tuple[str, ...] = ()):
    src = folder / "harness.c"
    src.write_text(harness_source(prefix))
    ff = folder / interface.file_names(prefix)["ff_source"]
    return hostc.compile_c([src, ff], folder / "harness", include=[folder], defines=defines)


@needs_gcc
def test_the_thumb1_rounding_form_gives_the_emulators_integers(tmp_path):
    """The demo's C compiled on the host as if for ARMv6-M (the macro's Thumb-1 branch) equals the
    emulator on the golden vectors, one-call and two-rate; the preprocessor shows that branch was taken."""
    fw = demo_firmware()
    write_files(tmp_path, render.render(fw))
    source = tmp_path / "larkspur_ff.c"
    assert "LARKSPUR_ROUND_SHIFT(motor_r, 12)" in source.read_text()
    cc = hostc.compiler()
    assert cc is not None
    expanded = subprocess.run(
        [cc, "-E", f"-D{THUMB1}", f"-I{tmp_path}", str(source)], capture_output=True, text=True, check=True
    ).stdout
    assert "((((motor_r) >> ((12) - 1)) + 1) >> 1)" in expanded
    exe = _harness(tmp_path, "larkspur", defines=(THUMB1,))
    rows = vectors.feedforward_table(fw, 4000)
    n = len(interface.FF_IN.columns)
    for mode in ("ff", "split"):
        assert np.array_equal(run_harness(exe, rows[:, :n], mode), rows[:, n:]), mode


@needs_gcc
@pytest.mark.parametrize("seed", [41, 7])
def test_products_made_inside_the_lookup_block_on_invented_vehicles(seed, tmp_path):
    """Invented vehicles: the rolling product is made inside the speed lookup block (exactly, as one
    multiply by a literal, in the shape's constant piece), and the C, both Thumb-1 and plain rounding,
    gives the emulator's integers on corners, clamping and random inputs: feed-forward (one call and two
    rates) and the forward helper."""
    fw = invented(seed, "veh")[1]
    files = render.render(fw)
    text = files["veh_ff.c"]
    assert "int32_t t_shape_r;" not in text and "so the product is exact" in text
    write_files(tmp_path, files)
    st = interface.ff_in(fw.vehicle)
    rows = interface.fields_to_rows(st, vectors.feedforward_inputs(fw.design.limits, 3000, vehicle=fw.vehicle))
    want = emulate.run(fw.design.feedforward, fw.tables, interface.rows_to_fields(st, rows))
    expect = np.column_stack([want["current"], want["clamped"]])
    lo, hi = interface.column_edges(fw.design.limits, interface.FWD_IN)  # the forward helper's inputs
    fin = np.stack([np.random.default_rng(seed).integers(a - 50, b + 50, 3000) for a, b in zip(lo, hi)], axis=-1)
    back = emulate.run(fw.design.forward, fw.tables, interface.rows_to_fields(interface.FWD_IN, fin))
    for defines in ((), (THUMB1,)):
        exe = _harness(tmp_path, "veh", defines)
        for mode in ("ff", "split"):
            assert np.array_equal(run_harness(exe, rows, mode), expect), (defines, mode)
        assert np.array_equal(run_harness(exe, fin, "fwd"), np.column_stack([back["accel"], back["clamped"]]))


def test_a_product_stays_outside_the_block_when_no_piece_makes_it_exact():
    """A constant piece that is not a multiple of 2^shift would need its rounding: the product is then
    left where it was (one product after the block); nor is it moved when the looked-up value has a
    second reader."""
    fw = demo_firmware()
    tables = {name: cview.table_view(cview.drive_home(fw), name, "larkspur") for name in fw.tables}
    prog, proof = fw.design.feedforward, fw.ff_proof
    ops = tuple(prog.ops)
    start = next(k for k, op in enumerate(ops) if op.dst == "t_fric_r")
    assert opview._fused_product(ops, start, "t_shape_r", table=tables["shape"], proof=proof, whole=ops) is not None
    shape = dict(tables["shape"])
    shape["pieces"] = [dict(p, value=p["value"] - 1) if p["kind"] == "constant" else p for p in shape["pieces"]]
    assert opview._fused_product(ops, start, "t_shape_r", table=shape, proof=proof, whole=ops) is None
    twice = (*ops, Sum("t_shape_r_again", ((1, "t_shape_r"),)))  # a second reader of the same value
    assert opview._fused_product(twice, start, "t_shape_r", table=tables["shape"], proof=proof, whole=twice) is None
    # ...also when that reader is in the other rate's part (the value would then be a state member)
    assert opview._fused_product(ops, start, "t_shape_r", table=tables["shape"], proof=proof, whole=twice) is None
