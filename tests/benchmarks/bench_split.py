"""Two-rate feed-forward on Cortex-M (unicorn): instructions of the slow part, the fast part and the
one-call form, for zig cc at -O2 and -Os, on the demo (int16) and its int32 twin. Results are checked
against the emulator (bit-exact). Writes tests/benchmarks/split_results.md and .json.

python tests/benchmarks/bench_split.py
"""

from __future__ import annotations

import dataclasses
import json
import statistics
import sys
import tempfile
from pathlib import Path

import jinja2
import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from kinetab.generator import interface, model, render, synthesis, vectors  # noqa: E402

from tests import cortexm  # noqa: E402
from tests.helpers import DEMO_PATH  # noqa: E402

HERE = Path(__file__).parent
N_IN = len(interface.FF_IN.columns)


def counts(fw: synthesis.Firmware, target: str, opt: str, compiler: str = "zig") -> dict[str, float]:
    rows = vectors.feedforward_table(fw, 600)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for name, text in render.render(fw).items():
            (folder / name).write_text(text)
        tpl = jinja2.Template((HERE / "split_bench.c.j2").read_text(), undefined=jinja2.StrictUndefined)
        (folder / "entry.c").write_text(tpl.render(prefix=fw.vehicle.name))
        build = cortexm.compile_elf if compiler == "zig" else cortexm.compile_elf_gcc
        elf = build(
            [folder / "entry.c", folder / f"{fw.vehicle.name}_ff.c"],
            target,
            "bench_entry",
            folder / "split.elf",
            extra=[f"-I{folder}", opt],
        )
        m = cortexm.Machine.load(elf, target, count=True)
        got: dict[str, list[int]] = {"slow": [], "fast": [], "one_call": []}
        for row in rows:
            for mode, key in ((0, "slow"), (1, "fast"), (2, "one_call")):
                out, n = m.call(np.array([mode, *row[:N_IN]], dtype="<i4").tobytes(), interface.FF_OUT.size)
                got[key].append(n)
                if mode:
                    assert interface.FF_OUT.unpack(out) == tuple(int(x) for x in row[N_IN:]), (mode, row)
        row = np.array([2, *rows[0][:N_IN]], dtype="<i4").tobytes()
        stack = m.stack_bytes(row, interface.FF_OUT.size)
        sizes = cortexm.elf_sizes(elf)
    result = {k: float(statistics.median(v)) for k, v in got.items()}
    result.update(flash=sizes.get(".text", 0) + sizes.get(".rodata", 0), stack=stack)
    return result


def float_m4f(fw: synthesis.Firmware, opt: str, compiler: str = "zig") -> float:
    """Median instructions of the float model (float_ff.c, the FPU) per call on Cortex-M4F."""
    from tests.benchmarks import bench_cortexm

    rows = vectors.feedforward_table(fw, 600)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        (folder / "float_params.h").write_text(bench_cortexm.float_params(fw))
        build = cortexm.compile_elf if compiler == "zig" else cortexm.compile_elf_gcc
        elf = build(
            [HERE / "float_ff.c"],
            "cortex_m4f",
            "bl_feedforward",
            folder / "float.elf",
            extra=[f"-I{folder}", "-Wno-double-promotion", opt],
        )
        m = cortexm.Machine.load(elf, "cortex_m4", count=True)
        return float(statistics.median(m.call(interface.FF_IN.pack(r[:N_IN]), interface.FF_OUT.size)[1] for r in rows))


def main() -> None:
    demo = model.load(DEMO_PATH)
    twin = dataclasses.replace(demo, firmware=dataclasses.replace(demo.firmware, word="int32"))
    results, floats = {}, {}
    compilers = ["zig"] + (["gcc-arm-none-eabi"] if cortexm.arm_gcc_available() else [])
    for label, v in (("int16 (demo)", demo), ("int32 twin", twin)):
        fw = synthesis.synthesise(v)
        for target in ("cortex_m0plus", "cortex_m4"):
            for compiler in compilers:
                for opt in ("-O2", "-Os"):
                    results[f"{label}, {target}, {compiler} {opt}"] = counts(fw, target, opt, compiler)
                    if label.startswith("int16") and target == "cortex_m4":
                        floats[f"{compiler} {opt}"] = float_m4f(fw, opt, compiler)
    (HERE / "split_results.json").write_text(json.dumps({"integer": results, "float_m4f": floats}, indent=2) + "\n")
    lines = [
        "# Two-rate feed-forward, instructions per call (both wheels, median; unicorn); flash: slow, fast and "
        "one-call functions with the tables; stack: the one-call form",
        "",
        "| model, core, compiler | slow part | fast part (every tick) | one-call form | flash bytes | stack bytes |",
        "|---|---|---|---|---|---|",
    ]
    lines += [
        f"| {k} | {r['slow']:.0f} | {r['fast']:.0f} | {r['one_call']:.0f} | {r['flash']} | {r['stack']} |"
        for k, r in results.items()
    ]
    lines += [
        "",
        "Cortex-M4, the demo against its float model on the FPU (tests/benchmarks/float_ff.c, Cortex-M4F), "
        "same compiler and setting:",
        "",
        "| compiler | float (FPU) | one-call form | ratio | fast part | ratio |",
        "|---|---|---|---|---|---|",
    ]
    for key, flt in floats.items():
        r = results[f"int16 (demo), cortex_m4, {key}"]
        lines.append(
            f"| {key} | {flt:.0f} | {r['one_call']:.0f} | {r['one_call'] / flt:.2f} | {r['fast']:.0f} | "
            f"{r['fast'] / flt:.2f} |"
        )
    (HERE / "split_results.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
