"""Where random vehicles' feed-forward cost goes: for invented vehicles of the test strategy's ranges, the
instructions per call of the fast part and the one-call form (Cortex-M0+, gcc-arm-none-eabi -Os, the
functions alone, median over uniform random inputs inside the envelope, bit-exact with the emulator),
beside the sizing cost model's table-lookup instructions (Firmware.instructions). What is left after
the lookups is the code's own cost (arithmetic, loads, clamps, the call), which the generator controls;
the lookups are what the budget and firmware.table_bytes_max leave. Each vehicle is measured at its own
byte cap and again with 8 kB allowed. Writes tests/benchmarks/models_results.md/.json.

python tests/benchmarks/bench_models.py [count]
"""

from __future__ import annotations

import json
import statistics
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(Path(__file__).parent))

from bench_inputs import input_classes, measure  # noqa: E402

from tests import cortexm  # noqa: E402
from tests.helpers import invented  # noqa: E402

HERE = Path(__file__).parent
ROOMY_BYTES = 8192
"""The second byte cap each vehicle is sized under: room for direct tables where they pay."""
CALLS = 100
"""Random inputs per vehicle."""


def one(fw) -> dict:
    """Medians of the fast part and the one-call form on random inputs, and the cost model's lookups."""
    rows = {"random": input_classes(fw, n=CALLS)["random"]}
    r = measure(fw, "cortex_m0plus", "gcc", "-Os", rows)["random"]
    fast, whole = statistics.median(r["fast"]), statistics.median(r["one_call"])
    return {
        "fast": fast,
        "one_call": whole,
        "lookups": fw.instructions,
        "one_call_less_lookups": whole - fw.instructions,
        "table_bytes": fw.total_bytes,
        "table_bytes_max": fw.vehicle.firmware.table_bytes_max,
    }


def main() -> None:
    if not cortexm.arm_gcc_available():
        sys.exit("bench_models: needs arm-none-eabi-gcc (apt install gcc-arm-none-eabi libnewlib-arm-none-eabi)")
    count = int(sys.argv[1]) if len(sys.argv) > 1 else 12
    roomy = lambda doc, _rng: doc["firmware"].update(table_bytes_max=ROOMY_BYTES)  # noqa: E731
    results: dict[str, dict] = {}
    for seed in range(1, count + 1):
        results[f"seed {seed}"] = one(invented(seed, "veh")[1])
        results[f"seed {seed}, {ROOMY_BYTES} B"] = one(invented(seed, "veh", roomy)[1])
    lines = [
        "# Random vehicles: feed-forward instructions per call against the table lookups they need",
        "",
        "Cortex-M0+, gcc-arm-none-eabi -Os, functions alone, median of "
        f"{CALLS} uniform random inputs inside the envelope (bit-exact with the emulator). Lookups: the "
        "sizing cost model's instructions for the table lookups (measured per lookup kind, "
        "bench_piece_cost.py). One-call less lookups: the code's own cost.",
        "",
        "| vehicle | table bytes / cap | fast | one-call | lookups | one-call less lookups |",
        "|---|---|---|---|---|---|",
    ]
    for label, r in results.items():
        lines.append(
            f"| {label} | {r['table_bytes']} / {r['table_bytes_max']:.0f} | {r['fast']:.0f} | {r['one_call']:.0f} "
            f"| {r['lookups']} | {r['one_call_less_lookups']:.0f} |"
        )
    rest = [r["one_call_less_lookups"] for r in results.values()]
    lines += ["", f"One-call less lookups over all {len(rest)}: {min(rest):.0f} to {max(rest):.0f}."]
    (HERE / "models_results.json").write_text(json.dumps(results, indent=2) + "\n")
    (HERE / "models_results.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
