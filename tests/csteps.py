"""Shared test steps for generated C: write files, render and compile the harness, run it, compare.

The harness is rendered from the interface description, so its input order is the structs' order.
"""

from __future__ import annotations

import subprocess
from pathlib import Path

import jinja2
import numpy as np
import pytest
from kinetab.generator import accuracy, emulate, hostc, interface, render

HARNESS = Path(__file__).parent / "c" / "harness.c.j2"
MODES = {"feedforward": "ff", "forward": "fwd", "lift": "lift"}
needs_gcc = pytest.mark.skipif(hostc.compiler() is None, reason="a C compiler is required (apt install gcc)")


def _call_view(call: interface.Call, prefix: str) -> dict[str, object]:
    ins, outs = call.inputs.lvalues(), call.outputs.lvalues()
    return {
        "name": call.name,
        "mode": MODES[call.name],
        "inputs": ins,
        "in_type": call.inputs.c_type(prefix),
        "out_type": call.outputs.c_type(prefix),
        "function": f"{prefix}_{call.name}",
        "scan": " ".join(["%ld"] * len(ins)),
        "refs": ", ".join(f"&v[{k}]" for k in range(len(ins))),
        "fmt": " ".join(["%ld"] * len(outs) + ["%lu"]),
        "prints": ", ".join([f"(long)out.{o}" for o in outs] + ["(unsigned long)out.clamped"]),
    }


def harness_source(prefix: str, calls: tuple[interface.Call, ...] = interface.CALLS) -> str:
    """The harness C for a vehicle prefix (calls: interface.calls(vehicle) for body-frame inputs)."""
    tpl = jinja2.Template(
        HARNESS.read_text(),
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
    )
    return tpl.render(
        header=interface.file_names(prefix)["ff_header"],
        prefix=prefix,
        state_type=f"{prefix}_ff_state_t",
        calls=[_call_view(c, prefix) for c in calls],
    )


def write_files(folder: Path, files: dict[str, str]) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    for name, text in files.items():
        (folder / name).write_text(text)
    return folder


def build_harness(folder: Path, prefix: str, calls: tuple[interface.Call, ...] = interface.CALLS) -> Path:
    """Compile the harness with the generated feed-forward C of `prefix` in `folder` (strict flags)."""
    src = folder / "harness.c"
    src.write_text(harness_source(prefix, calls))
    return hostc.compile_c(
        [src, folder / interface.file_names(prefix)["ff_source"]], folder / "harness", include=[folder]
    )


def run_harness(exe: Path, rows: np.ndarray, mode: str = "ff") -> np.ndarray:
    """Feed integer rows to the harness; returns its output rows (outputs, then the clamp bits)."""
    text = "\n".join(" ".join(str(int(x)) for x in r) for r in rows) + "\n"
    out = subprocess.run([str(exe), mode], input=text, capture_output=True, text=True, check=True).stdout
    return np.array([[int(x) for x in line.split()] for line in out.strip().splitlines()], dtype=np.int64)


def assert_host_c_within_bound(fw, inp: dict[str, np.ndarray], folder: Path) -> None:
    """The generated feed-forward C (host compiler, strict flags) bit-exact with the emulator on `inp`,
    and the emulator within the proven bound of the float model there."""
    exe = build_harness(write_files(folder, render.render(fw)), fw.vehicle.name)
    ints = run_harness(exe, interface.fields_to_rows(interface.FF_IN, inp))
    want = emulate.run(fw.design.feedforward, fw.tables, inp)["current"]
    assert np.array_equal(ints[:, :2], want)
    got = want * fw.vehicle.firmware.current_lsb_a
    ref = accuracy.reference_current(fw, accuracy.operating_point(fw, inp))
    assert np.max(np.abs(got - ref)) <= fw.ff_bound_a + 1e-12
