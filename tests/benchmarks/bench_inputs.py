"""The feed-forward's cost on Cortex-M on the inputs a vehicle sees: instructions of the functions alone
(called at their own symbols in unicorn, no dispatcher), for the slow part, the fast part and the one-call
form, per input class and as one weighted median; the envelope's fixed corner rows on a separate line.
Every result is checked against the emulator (bit-exact). Writes tests/benchmarks/inputs_results.md/.json.

Input classes (firmware steps, the vehicle's input struct):
- random: uniform inside the envelope (the weight of most of a vehicle's time);
- near zero: the speed inputs within the deadband and blend band (starting, stopping, holding);
- back-driving: inside the envelope with at least one wheel back-driven (the float model says so);
- clamped: at least one input beyond its edge;
- corners: the golden vectors' fixed rows (every corner, deadband edges, region vertices): reported apart.

python tests/benchmarks/bench_inputs.py
"""

from __future__ import annotations

import dataclasses
import json
import statistics
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from kinetab.generator import accuracy, dynamics, emulate, interface, model, render, synthesis, vectors  # noqa: E402

from tests import cortexm  # noqa: E402
from tests.helpers import DEMO_PATH, invented  # noqa: E402

HERE = Path(__file__).parent
WEIGHTS = {"random": 0.7, "near zero": 0.1, "back-driving": 0.1, "clamped": 0.1}
"""The weighted median's mix: most of the time inside the envelope, a tenth each at the three edges."""
PER_CLASS = 150
CONFIGS = (("cortex_m0plus", "gcc", "-Os"), ("cortex_m0plus", "zig", "-Os"), ("cortex_m4", "gcc", "-Os"))
SPEED_INPUTS = ("speed", "forward_speed", "yaw_rate")


def _uniform(rng: np.random.Generator, lo: np.ndarray, hi: np.ndarray, n: int) -> np.ndarray:
    return np.stack([rng.integers(a, b + 1, n) for a, b in zip(lo, hi)], -1).astype(np.int64)


def _backdriven(fw: synthesis.Firmware, rows: np.ndarray) -> np.ndarray:
    """Rows where the float model's rim force of either wheel opposes that wheel's speed."""
    st = interface.ff_in(fw.vehicle)
    op = accuracy.operating_point(fw, interface.rows_to_fields(st, rows))
    right, left = dynamics.wheel_forces(fw.vehicle, op)
    return dynamics.opposed(right.total, op.speed_right) | dynamics.opposed(left.total, op.speed_left)


def input_classes(fw: synthesis.Firmware, n: int = PER_CLASS, seed: int = 3) -> dict[str, np.ndarray]:
    """Rows (steps, struct columns) of each input class, n each (fewer only if a class is that rare)."""
    v, lim = fw.vehicle, fw.design.limits
    st = interface.ff_in(v)
    rng = np.random.default_rng(seed)
    lo, hi = interface.column_edges(lim, st)
    inside = lambda rows: rows[accuracy.inside_envelope(v, lim, rows)]  # noqa: E731
    many = inside(_uniform(rng, lo, hi, 40 * n))
    band = max(lim.deadband, int(dynamics.blend_width(v) / v.firmware.speed_lsb_mps)) + 2
    near = _uniform(rng, lo, hi, 4 * n)
    for k, column in enumerate(st.columns):
        if any(column.startswith(name) for name in SPEED_INPUTS):
            near[:, k] = rng.integers(-band, band + 1, len(near))
    margin = np.maximum((hi - lo) // 10, 1)
    wide = _uniform(rng, lo - margin * (lo != 0), hi + margin, 4 * n)
    return {
        "random": many[:n],
        "near zero": inside(near)[:n],
        "back-driving": many[_backdriven(fw, many)][:n],
        "clamped": wide[~accuracy.inside_envelope(v, lim, wide)][:n],
        "corners": interface.fields_to_rows(st, vectors.feedforward_inputs(lim, 0, vehicle=v)),
    }


def _elf(fw: synthesis.Firmware, folder: Path, target: str, compiler: str, opt: str) -> Path:
    """The generated feed-forward C alone, every public function kept (entry: the one-call form)."""
    for name, text in render.render(fw).items():
        (folder / name).write_text(text)
    prefix = fw.vehicle.name
    keep = [f"-Wl,-u,{prefix}_ff_slow", f"-Wl,-u,{prefix}_ff_fast", opt]  # kept from --gc-sections
    build = cortexm.compile_elf if compiler == "zig" else cortexm.compile_elf_gcc
    return build([folder / f"{prefix}_ff.c"], target, f"{prefix}_feedforward", folder / "ff.elf", extra=keep)


def measure(fw: synthesis.Firmware, target: str, compiler: str, opt: str, classes: dict[str, np.ndarray]) -> dict:
    """Per class: median instructions of slow, fast and one-call (each checked bit-exact); flash; stack."""
    st, prefix = interface.ff_in(fw.vehicle), fw.vehicle.name
    out_size = interface.FF_OUT.size
    with tempfile.TemporaryDirectory() as tmp:
        elf = _elf(fw, Path(tmp), target, compiler, opt)
        m = cortexm.Machine.load(elf, target, count=True)
        sizes = cortexm.elf_sizes(elf)
        result: dict = {"flash": sizes.get(".text", 0) + sizes.get(".rodata", 0)}
        for name, rows in classes.items():
            want = emulate.run(fw.design.feedforward, fw.tables, interface.rows_to_fields(st, rows))
            got: dict[str, list[int]] = {"slow": [], "fast": [], "one_call": []}
            for k, row in enumerate(rows):
                expect = (*(int(x) for x in want["current"][k]), int(want["clamped"][k]))
                inp, state, out = m.write(0, st.pack(row)), cortexm.RAM + 0x400, cortexm.RAM + 0x200
                got["slow"].append(m.run_at(f"{prefix}_ff_slow", [inp, state]))
                got["fast"].append(m.run_at(f"{prefix}_ff_fast", [inp, state, out]))
                assert interface.FF_OUT.unpack(m.read(0x200, out_size)) == expect, (name, row)
                m.write(0x200, bytes(out_size))
                got["one_call"].append(m.run_at(f"{prefix}_feedforward", [inp, out]))
                assert interface.FF_OUT.unpack(m.read(0x200, out_size)) == expect, (name, row)
            result[name] = {part: got[part] for part in got}
        result["stack"] = _stack(m, prefix, st.pack(classes["random"][0]))
    return result


def _stack(m: cortexm.Machine, prefix: str, packed: bytes, depth: int = 2048) -> int:
    """Stack bytes the one-call form uses: the area below SP painted, the lowest byte changed."""
    top = cortexm.RAM + cortexm.RAM_SIZE - 16
    m.uc.mem_write(top - depth, b"\xa5" * depth)  # type: ignore[attr-defined]
    m.run_at(f"{prefix}_feedforward", [m.write(0, packed), cortexm.RAM + 0x200])
    painted = bytes(m.uc.mem_read(top - depth, depth))  # type: ignore[attr-defined]
    return depth - next((k for k, b in enumerate(painted) if b != 0xA5), depth)


def weighted_median(per_class: dict[str, list[int]]) -> float:
    """The median of the WEIGHTS mix: each class's calls weighted by its share over its count."""
    values, weights = [], []
    for name, share in WEIGHTS.items():
        calls = per_class[name]
        values += calls
        weights += [share / len(calls)] * len(calls)
    order = np.argsort(values)
    cum = np.cumsum(np.array(weights)[order])
    return float(np.array(values)[order][np.searchsorted(cum, 0.5 * cum[-1])])


def models() -> dict[str, synthesis.Firmware]:
    """The demo, its int32 twin, the demo with 8 kB of tables allowed (sizing then picks a direct friction
    table outside the deadband), three invented vehicles of the test strategy's ranges, and the first of
    them with body-frame inputs (firmware.inputs = 'body', default steps)."""
    demo = model.load(DEMO_PATH)
    twin = dataclasses.replace(demo, firmware=dataclasses.replace(demo.firmware, word="int32"))
    roomy = dataclasses.replace(demo, firmware=dataclasses.replace(demo.firmware, table_bytes_max=8192))
    out = {"demo (int16)": synthesis.synthesise(demo), "demo int32 twin": synthesis.synthesise(twin)}
    out["demo, table_bytes_max 8192"] = synthesis.synthesise(roomy)
    for seed in (40, 5, 7):
        out[f"invented seed {seed}"] = invented(seed, "veh")[1]
    body = invented(40, "veh", lambda doc, _rng: doc["firmware"].update(inputs="body"))[1]
    out["invented seed 40, body-frame inputs"] = body
    return out


def _row(label: str, config: str, r: dict, part: str) -> str:
    meds = {name: statistics.median(r[name][part]) for name in (*WEIGHTS, "corners")}
    cells = " | ".join(f"{meds[n]:.0f}" for n in WEIGHTS)
    weighted = weighted_median({n: r[n][part] for n in WEIGHTS})
    return f"| {label} | {config} | {part} | {weighted:.0f} | {cells} | {meds['corners']:.0f} |"


def main() -> None:
    results, lines = {}, []
    head = " | ".join(WEIGHTS)
    lines += [
        "# Feed-forward instructions per call on Cortex-M, the functions alone (unicorn; bit-exact with the "
        "emulator), by input class",
        "",
        "Weighted median: " + ", ".join(f"{n} {w:.0%}" for n, w in WEIGHTS.items()) + f"; {PER_CLASS} calls per "
        "class; corners: the golden vectors' fixed rows, apart. Flash: the three functions and the tables; stack: "
        "the one-call form.",
        "",
        f"| model | core, compiler | part | weighted median | {head} | corners |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    flash = ["", "| model | core, compiler | flash bytes | stack bytes |", "|---|---|---|---|"]
    for label, fw in models().items():
        classes = input_classes(fw)
        for target, compiler, opt in CONFIGS:
            if (
                compiler == "gcc"
                and not cortexm.arm_gcc_available()
                or compiler == "zig"
                and not cortexm.zig_available()
            ):
                continue
            config = f"{target}, {compiler} {opt}"
            r = measure(fw, target, compiler, opt, classes)
            results[f"{label}, {config}"] = {
                "flash": r["flash"],
                "stack": r["stack"],
                **{
                    part: {
                        "weighted": weighted_median({n: r[n][part] for n in WEIGHTS}),
                        **{n: statistics.median(r[n][part]) for n in (*WEIGHTS, "corners")},
                    }
                    for part in ("slow", "fast", "one_call")
                },
            }
            lines += [_row(label, config, r, part) for part in ("fast", "one_call", "slow")]
            flash.append(f"| {label} | {config} | {r['flash']} | {r['stack']} |")
    (HERE / "inputs_results.json").write_text(json.dumps(results, indent=2) + "\n")
    (HERE / "inputs_results.md").write_text("\n".join(lines + flash) + "\n")
    print("\n".join(lines + flash))


if __name__ == "__main__":
    main()
