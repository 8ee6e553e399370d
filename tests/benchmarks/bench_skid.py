"""A skid-steer's feed-forward on Cortex-M: instructions of the slow part, the fast part and the one-call
form (unicorn, medians over the golden vectors, each result checked bit-exact against the emulator), its
table bytes and proven bound, and the spin and straight currents; beside its twin on casters (the same
vehicle with [casters] for [skid]), whose program has no turning term. Models: the bundled skid-steer
demo and invented skid-steers (tests/test_skid.py). Writes tests/benchmarks/skid_results.md/.json.

python tests/benchmarks/bench_skid.py
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from kinetab.generator import dynamics, model, synthesis  # noqa: E402

from tests import cortexm  # noqa: E402
from tests.benchmarks.bench_split import counts  # noqa: E402
from tests.helpers import vehicle_from  # noqa: E402
from tests.test_skid import _skid_vehicle  # noqa: E402

HERE = Path(__file__).parent
DEMO = ROOT / "generator" / "demos" / "bramble.toml"


def _twin(doc: dict) -> dict:
    """The same vehicle on casters 0.6 m behind, rolling like the wheels, its CoGs moved 0.1 m behind the
    axle so it stands ([skid] out; the program's cost does not depend on these values)."""
    out = {k: (dict(v) if isinstance(v, dict) else v) for k, v in doc.items() if k != "skid"}
    out["casters"] = {"behind_axle": "0.6 m", "rolling_resistance": doc["wheels"]["rolling_resistance"]}
    out["body"]["cog_ahead"] = out["payload"]["cog_ahead"] = "-0.1 m"
    return out


def _currents(v) -> dict[str, float]:
    """Per-motor current at full payload: spinning in place and driving straight at half speed_max, A."""
    half = v.envelope.speed_max_mps / 2
    out = {}
    for label, left in (("spin", -half), ("straight", half)):
        op = dynamics.OperatingPoint(
            speed_right=half,
            speed_left=left,
            accel_right=0.0,
            accel_left=0.0,
            pitch_rad=0.0,
            roll_rad=0.0,
            payload_kg=v.payload.mass_max_kg,
        )
        out[label] = float(abs(dynamics.wheel_currents(v, op)[0]))
    return out


def measure(label: str, v, compilers: list[str]) -> dict:
    fw = synthesis.synthesise(v)
    row = {
        "table_bytes": fw.total_bytes,
        "bound_mA": fw.ff_bound_a * 1000,
        "budget_mA": v.firmware.current_budget_a * 1000,
        **{f"{k}_A": x for k, x in _currents(v).items()},
    }
    for target in ("cortex_m0plus", "cortex_m4"):
        for compiler in compilers:
            c = counts(fw, target, "-Os", compiler)
            row[f"{target}, {compiler} -Os"] = {k: c[k] for k in ("slow", "fast", "one_call", "flash", "stack")}
    print(label, json.dumps(row))
    return row


def main() -> None:
    import tomllib

    compilers = ["zig"] + (["gcc-arm-none-eabi"] if cortexm.arm_gcc_available() else [])
    demo_doc = tomllib.loads(DEMO.read_text())
    models = [("bramble (demo)", demo_doc)]
    models += [
        (f"invented, {w} wheels a side (seed {s})", _skid_vehicle(s, w, feasible=True)[0]) for s, w in ((81, 3),)
    ]
    results = {}
    for label, doc in models:
        results[label] = measure(label, model.parse_document(doc, label), compilers)
        results[f"{label}, twin on casters"] = measure(label + " twin", vehicle_from(_twin(doc)), compilers)
    (HERE / "skid_results.json").write_text(json.dumps(results, indent=2) + "\n")
    lines = [
        "# Skid-steer feed-forward on Cortex-M (instructions per call, both wheels, median over the golden "
        "vectors; -Os), against its twin on casters",
        "",
        "| model | core, compiler | slow part | fast part | one-call | flash bytes | table bytes | proven bound "
        "| spin / straight current |",
        "|---|---|---|---|---|---|---|---|---|",
    ]
    for label, r in results.items():
        for key, c in r.items():
            if not isinstance(c, dict):
                continue
            lines.append(
                f"| {label} | {key} | {c['slow']:.0f} | {c['fast']:.0f} | {c['one_call']:.0f} | {c['flash']} | "
                f"{r['table_bytes']} | {r['bound_mA']:.2f} of {r['budget_mA']:.0f} mA | "
                f"{r['spin_A']:.2f} / {r['straight_A']:.2f} A |"
            )
    (HERE / "skid_results.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
