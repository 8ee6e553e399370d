"""Golden copies of the demo's generated C: any change to the output shows up as a reviewable diff.

The goldens are not trusted on their own: the committed C is compiled and run on golden vectors and
must equal the emulator bit for bit and stay within the budget of the float model.
Refresh with `python -m pytest tests/test_golden.py --refresh-golden` and review the diff.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from kinetab.generator import accuracy, interface, vectors

from tests.csteps import build_harness, needs_gcc, run_harness
from tests.firmware_fixtures import demo_files, demo_firmware

GOLDEN = Path(__file__).parent / "golden"


def test_generated_files_match_golden(request):
    files = demo_files()
    if request.config.getoption("--refresh-golden"):
        for name, text in files.items():
            (GOLDEN / name).write_text(text, encoding="utf-8", newline="\n")
    for name, text in files.items():
        assert (GOLDEN / name).read_text(encoding="utf-8") == text, f"{name} changed: refresh and review the diff"


@needs_gcc
def test_golden_c_is_right_independently(tmp_path):
    for name in ("larkspur_ff.c", "larkspur_ff.h"):
        (tmp_path / name).write_bytes((GOLDEN / name).read_bytes())
    fw = demo_firmware()
    rows = vectors.feedforward_table(fw, 3000)
    n = len(interface.FF_IN.columns)
    assert np.array_equal(run_harness(build_harness(tmp_path, "larkspur"), rows[:, :n]), rows[:, n:])
    inp = accuracy.envelope_points(fw, 3000, 21)
    grid = interface.fields_to_rows(interface.FF_IN, inp)
    amps = run_harness(build_harness(tmp_path, "larkspur"), grid)[:, :2] * fw.vehicle.firmware.current_lsb_a
    ref = accuracy.reference_current(fw, accuracy.operating_point(fw, inp))
    assert np.max(np.abs(amps - ref)) <= fw.vehicle.firmware.current_budget_a


@pytest.mark.parametrize("name", ["larkspur_ff.c", "larkspur_ff.h"])
def test_golden_files_have_lf_endings_and_no_time_stamp(name):
    data = (GOLDEN / name).read_bytes()
    assert b"\r" not in data and data.endswith(b"\n")
    assert b"2026" not in data and b"generated on" not in data.lower()


def test_compiled_template_cache_changes_no_byte(tmp_path, monkeypatch):
    """Templates compiled once and read back from the cache folder (jinja2's bytecode cache) render the
    same text as templates compiled afresh; so do corrupt entries and a cache that cannot be written
    (a miss, never an error); other environment options get a folder of their own."""
    import jinja2
    from kinetab.generator import render

    fw = demo_firmware()
    monkeypatch.setenv(render.CACHE_ENV, "off")
    fresh = render.render(fw)
    monkeypatch.setenv(render.CACHE_ENV, str(tmp_path / "cache"))
    first, second = render.render(fw), render.render(fw)  # the second reads what the first wrote
    entries = [p for p in (tmp_path / "cache").rglob("*") if p.is_file()]
    assert fresh == first == second and len(entries) >= 2
    for entry in entries:
        entry.write_bytes(b"not a compiled template")
    assert render.render(fw) == fresh

    def refuse(self, bucket):
        raise PermissionError("read-only cache")

    monkeypatch.setattr(jinja2.FileSystemBytecodeCache, "dump_bytecode", refuse)
    monkeypatch.setenv(render.CACHE_ENV, str(tmp_path / "other"))
    assert render.render(fw) == fresh
    folder = render._cache_folder(tmp_path)
    monkeypatch.setitem(render.OPTIONS, "trim_blocks", False)
    assert render._cache_folder(tmp_path) != folder
