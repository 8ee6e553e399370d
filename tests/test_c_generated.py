"""Generated C: strict host compile, C++ header, bit-exact with the Python emulation on golden
vectors (gcc), the same integers on Cortex-M0+/M4 (zig cc + unicorn), determinism, fingerprint."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from kinetab.generator import accuracy, emulate, hostc, interface, model, render, synthesis, vectors

from tests import cortexm
from tests.csteps import build_harness, needs_gcc, run_harness, write_files
from tests.firmware_fixtures import demo_files, demo_firmware
from tests.helpers import demo_doc, random_firmware_strategy, vehicle_from

RANDOM_MODELS = settings(
    max_examples=6,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much, HealthCheck.function_scoped_fixture],
)
"""Hypothesis settings of the tests that compile C for random models (a few seconds each)."""


@pytest.fixture(scope="module")
def demo_dir(tmp_path_factory):
    return write_files(tmp_path_factory.mktemp("demo_c"), demo_files())


needs_gxx = pytest.mark.skipif(shutil.which("g++") is None, reason="g++ is required for the C++ header check")


@needs_gcc
def test_strict_host_compile(demo_dir):
    hostc.compile_c([demo_dir / "larkspur_ff.c"], demo_dir / "a.o", extra=["-c"])


@needs_gxx
def test_header_compiles_as_cxx(demo_dir):
    """Regression: the suite needed g++ but only checked for gcc, so a gcc-only machine failed here."""
    subprocess.run(
        [
            "g++",
            "-x",
            "c++",
            "-std=c++11",
            "-Wall",
            "-Wextra",
            "-Wpedantic",
            "-Wconversion",
            "-Wsign-conversion",
            "-Werror",
            "-fsyntax-only",
            str(demo_dir / "larkspur_ff.h"),
        ],
        check=True,
        capture_output=True,
        text=True,
    )


def test_generated_c_contract(demo_dir):
    """The C contract in README: stdint only, guards, prefixed API, no float/double/malloc/division, no time stamp."""
    h = (demo_dir / "larkspur_ff.h").read_text()
    c = (demo_dir / "larkspur_ff.c").read_text()
    assert "#ifndef LARKSPUR_FF_H" in h and 'extern "C"' in h and "#include <stdint.h>" in h
    assert "typedef struct { int32_t speed[2]" not in h  # laid out one field per line, same members:
    for member in (
        "int32_t speed[2];",
        "int32_t accel[2];",
        "int32_t pitch;",
        "int32_t roll;",
        "int32_t payload;",
        "int32_t current[2];",
        "uint32_t clamped;",
    ):
        assert member in h
    assert "enum { LARKSPUR_RIGHT = 0, LARKSPUR_LEFT = 1 };" in h
    assert "void larkspur_feedforward(const larkspur_ff_in_t *in, larkspur_ff_out_t *out);" in h
    assert "#define LARKSPUR_FINGERPRINT 0x" in h
    code = "\n".join(
        line for line in c.splitlines() if not line.lstrip().startswith(("/*", "*")) and "sizeof(" not in line
    )  # static size checks
    for banned in ("float", "double", "malloc", " / ", "#include <math.h>", "for (", "while ("):
        assert banned not in code, banned
    assert c.count("#include") == 1 and "\r" not in c + h


@needs_gcc
def test_host_bit_exact_with_emulation_on_golden_vectors(demo_dir):
    fw = demo_firmware()
    rows = vectors.feedforward_table(fw, 10_000)
    assert len(rows) >= 10_000
    exe = build_harness(demo_dir, "larkspur")
    n = len(interface.FF_IN.columns)
    assert np.array_equal(run_harness(exe, rows[:, :n]), rows[:, n:])
    # the forward-dynamics helper too
    rng = np.random.default_rng(5)
    lim = fw.design.limits
    lo, hi = interface.column_edges(lim, interface.FWD_IN)
    fin = np.stack([rng.integers(a - 50, b + 50, 4000) for a, b in zip(lo, hi)], axis=-1)
    out = emulate.run(fw.design.forward, fw.tables, interface.rows_to_fields(interface.FWD_IN, fin))
    expect = np.column_stack([out["accel"], out["clamped"]])
    assert np.array_equal(run_harness(exe, fin, "fwd"), expect)


def test_two_builds_byte_identical_and_fingerprint_follows_the_model():
    a = render.render(synthesis.synthesise(model.load(demo_firmware().vehicle.source)))
    assert a == demo_files()
    doc = demo_doc()
    doc["wheels"]["diameter"] = "151 mm"
    changed = synthesis.synthesise(vehicle_from(doc))
    assert changed.fingerprint != demo_firmware().fingerprint
    assert f"0x{changed.fingerprint:08X}u" in render.render(changed)["larkspur_ff.h"]


@pytest.mark.slow
@pytest.mark.skipif(not cortexm.zig_available(), reason="pip install ziglang")
@pytest.mark.parametrize("target", ["cortex_m0plus", "cortex_m4"])
def test_cortex_m_same_integers_as_host(demo_dir, target, tmp_path):
    """Strict flags for the target, then run in unicorn with the matching CPU model (DEVELOPERS.md, cross-compiling)."""
    fw = demo_firmware()
    rows = vectors.feedforward_table(fw, 1500)
    elf = cortexm.compile_elf([demo_dir / "larkspur_ff.c"], target, "larkspur_feedforward", tmp_path / "ff.elf")
    machine = cortexm.Machine.load(elf, target)
    for row in rows:
        n = len(interface.FF_IN.columns)
        out, _ = machine.call(interface.FF_IN.pack(row[:n]), interface.FF_OUT.size)
        assert interface.FF_OUT.unpack(out) == tuple(int(x) for x in row[n:]), row


@pytest.mark.slow
@pytest.mark.skipif(not cortexm.zig_available(), reason="pip install ziglang")
@pytest.mark.parametrize("target", ["cortex_m0plus", "cortex_m4"])
@pytest.mark.parametrize("word", ["int16", "int32"])
def test_cortex_m_both_rates_same_integers_as_the_emulator(target, word, tmp_path):
    """slow + fast and the one-call form on the core itself (arithmetic shifts, the two-part products of
    int32 models), against the emulator on golden vectors."""
    import dataclasses

    import jinja2

    v = demo_firmware().vehicle
    fw = synthesis.synthesise(dataclasses.replace(v, firmware=dataclasses.replace(v.firmware, word=word)))
    write_files(tmp_path, render.render(fw))
    bench = Path(__file__).parent / "benchmarks" / "split_bench.c.j2"
    (tmp_path / "entry.c").write_text(jinja2.Template(bench.read_text()).render(prefix=fw.vehicle.name))
    sources = [tmp_path / "entry.c", tmp_path / f"{fw.vehicle.name}_ff.c"]
    machine = cortexm.Machine.load(
        cortexm.compile_elf(sources, target, "bench_entry", tmp_path / "e.elf", extra=[f"-I{tmp_path}"]), target
    )
    n = len(interface.FF_IN.columns)
    for row in vectors.feedforward_table(fw, 800):
        for mode in (0, 1, 2):  # slow part, fast part (after it), one-call form
            out, _ = machine.call(np.array([mode, *row[:n]], dtype="<i4").tobytes(), interface.FF_OUT.size)
            if mode:
                assert interface.FF_OUT.unpack(out) == tuple(int(x) for x in row[n:]), (mode, row)


@needs_gcc
@pytest.mark.slow
@RANDOM_MODELS
@given(fw=random_firmware_strategy())
def test_compiled_c_within_budget_of_float_model_on_random_models(fw, tmp_path_factory):
    folder = write_files(tmp_path_factory.mktemp("rand_c"), render.render(fw))
    exe = build_harness(folder, "veh")
    inp = accuracy.envelope_points(fw, 5000, 11)
    ints = run_harness(exe, interface.fields_to_rows(interface.FF_IN, inp))
    assert np.array_equal(ints[:, :2], emulate.run(fw.design.feedforward, fw.tables, inp)["current"])
    got = ints[:, :2] * fw.vehicle.firmware.current_lsb_a
    ref = accuracy.reference_current(fw, accuracy.operating_point(fw, inp))
    assert np.max(np.abs(got - ref)) <= fw.vehicle.firmware.current_budget_a


def test_generated_comments_say_one_clear_thing(demo_dir):
    """Regression (read as its user would): the type named twice ('int16_t int16 x 2^14'), an integer
    format read as whole kilograms ('Q15.0: 0.00288867 kg per step'), '2^-0', symbols used without being
    defined ('m c / (4 b^2)'), raw clamp masks, and static helpers without the vehicle prefix."""
    h = (demo_dir / "larkspur_ff.h").read_text()
    c = (demo_dir / "larkspur_ff.c").read_text()
    assert "int16_t int16" not in c and "2^-0" not in c + h and "1 per step" not in h
    assert "Q15.0: " not in h and "result step 0.00288867 kg (Q15.0)" in h
    assert "m c / (4 b^2) (m: vehicle plus payload, c: their CoG ahead of P, b: half track)" in h
    assert "clamped |= 0x" not in c and "clamped |= LARKSPUR_CLAMPED_PITCH;" in c
    statics = [line for line in c.splitlines() if line.startswith("static int32_t ")]
    assert statics and all(line.startswith("static int32_t larkspur_") for line in statics)


@needs_gcc
def test_two_rates_equal_the_one_call_form_and_the_emulation(demo_dir):
    """slow + fast in C = the one-call C = the emulator's split = the emulator, bit for bit, on the
    golden vectors (corners, deadband edges, clamping, int32 extremes, random)."""
    fw = demo_firmware()
    rows = vectors.feedforward_table(fw, 10_000)
    n = len(interface.FF_IN.columns)
    exe = build_harness(demo_dir, "larkspur")
    assert np.array_equal(run_harness(exe, rows[:, :n], "split"), rows[:, n:])
    inp = interface.rows_to_fields(interface.FF_IN, rows[:, :n])
    both = emulate.run_by_rate(fw.design.feedforward, fw.tables, inp)
    assert np.array_equal(both["current"], rows[:, n : n + 2]) and np.array_equal(both["clamped"], rows[:, n + 2])


@needs_gcc
@pytest.mark.slow
@RANDOM_MODELS
@given(fw=random_firmware_strategy())
def test_two_rates_equal_the_one_call_form_on_random_models(fw, tmp_path_factory):
    folder = write_files(tmp_path_factory.mktemp("rand_split"), render.render(fw))
    exe = build_harness(folder, "veh")
    rows = interface.fields_to_rows(interface.FF_IN, vectors.feedforward_inputs(fw.design.limits, 3000))
    assert np.array_equal(run_harness(exe, rows, "split"), run_harness(exe, rows, "ff"))
