"""The lift function on Cortex-M: instructions of `<prefix>_lift()` alone (unicorn, gcc -Os), its table
bytes and proven bound, for the test's worked example and invented lifts; every call checked bit-exact
against the emulator. Writes tests/benchmarks/lift_results.md/.json.

python tests/benchmarks/bench_lift.py
"""

from __future__ import annotations

import json
import statistics
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from kinetab.generator import emulate, interface, render, synthesis  # noqa: E402

from tests import cortexm  # noqa: E402
from tests.test_lift import WORKED, random_lift, with_lift  # noqa: E402

HERE = Path(__file__).parent
CALLS = 300
TARGETS = ("cortex_m0plus", "cortex_m4")


def _rows(lim, rng: np.random.Generator) -> np.ndarray:
    """Uniform inside the lift's envelope, in the struct's column order."""
    edges = [(-lim.speed, lim.speed), (-lim.accel, lim.accel), (0, lim.payload)]
    return np.stack([rng.integers(lo, hi + 1, CALLS) for lo, hi in edges], -1)


def measure(fw: synthesis.Firmware, target: str) -> float:
    """Median instructions of `<prefix>_lift()` over uniform inputs, each result checked bit-exact."""
    lf, prefix = fw.lift, fw.vehicle.name
    assert lf is not None
    rows = _rows(lf.limits, np.random.default_rng(5))
    want = emulate.run(lf.program, lf.tables, {c: rows[:, k] for k, c in enumerate(interface.LIFT_IN.columns)})
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for name, text in render.render(fw).items():
            (folder / name).write_text(text)
        elf = cortexm.compile_elf_gcc(
            [folder / f"{prefix}_ff.c"], target, f"{prefix}_lift", folder / "ff.elf", extra=["-Os"]
        )
        m = cortexm.Machine.load(elf, target, count=True)
        counts = []
        for k, row in enumerate(rows):
            counts.append(m.run_at(f"{prefix}_lift", [m.write(0, interface.LIFT_IN.pack(row)), cortexm.RAM + 0x200]))
            got = interface.LIFT_OUT.unpack(m.read(0x200, interface.LIFT_OUT.size))
            assert got == (int(want["current"][k][0]), int(want["clamped"][k])), (got, k)
    return float(statistics.median(counts))


def main() -> None:
    lifts = {"worked example (tests/test_lift.py)": with_lift(WORKED)}
    lifts |= {f"invented seed {s}": with_lift(random_lift(np.random.default_rng(s))) for s in (1, 3)}
    results = {}
    for label, v in lifts.items():
        fw = synthesis.synthesise(v)
        assert fw.lift is not None and v.lift is not None
        results[label] = {
            "table_bytes": fw.lift.total_bytes,
            "bound_a": fw.lift.bound_a,
            "budget_a": v.lift.current_budget_a,
            **{target: measure(fw, target) for target in TARGETS},
        }
    (HERE / "lift_results.json").write_text(json.dumps(results, indent=2) + "\n")
    lines = [
        "# The lift function on Cortex-M (gcc -Os, unicorn; bit-exact with the emulator)",
        "",
        f"Median instructions of `<prefix>_lift()` alone over {CALLS} uniform inputs inside the lift's envelope.",
        "",
        "| lift | table bytes | proven bound / budget [mA] | M0+ | M4 |",
        "|---|---|---|---|---|",
    ]
    for label, r in results.items():
        lines.append(
            f"| {label} | {r['table_bytes']} | {r['bound_a'] * 1000:.3f} / {r['budget_a'] * 1000:.1f} | "
            f"{r['cortex_m0plus']:.0f} | {r['cortex_m4']:.0f} |"
        )
    (HERE / "lift_results.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
