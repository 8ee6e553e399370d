"""Run every benchmark on the demo model and write tests/benchmarks/results.md (and .json).

python tests/benchmarks/run.py            # all: about forty minutes on a plain 2-core machine (two exhaustive searches)
python tests/benchmarks/run.py cortexm    # one part (tables, build, cortexm), others kept from results.json
"""

from __future__ import annotations

import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from kinetab.generator import model, synthesis  # noqa: E402

from tests.benchmarks import bench_cortexm, bench_tables  # noqa: E402
from tests.helpers import DEMO_PATH  # noqa: E402


def build_time(runs: int = 11) -> dict[str, float]:
    """Medians of `runs` wall times of `kinetab build` on the demo and of `python -c 'import numpy'`,
    interleaved (so both see the same machine load). Python may write bytecode (into a temporary folder,
    not the tree), as an installed package has it: numpy's is compiled at install time too."""
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    builds, imports = [], []
    with tempfile.TemporaryDirectory() as tmp:
        env["PYTHONPYCACHEPREFIX"] = str(Path(tmp) / "pycache")
        cmd = [sys.executable, "-m", "kinetab.generator", "build", str(DEMO_PATH), "-o", str(Path(tmp) / "out")]
        for _ in range(runs):
            for times, argv in ((imports, [sys.executable, "-c", "import numpy"]), (builds, cmd)):
                t = time.perf_counter()
                subprocess.run(argv, check=True, capture_output=True, env=env)
                times.append(time.perf_counter() - t)
    build, numpy = statistics.median(builds), statistics.median(imports)
    return {"build_s": build, "import_numpy_s": numpy, "ratio": build / numpy}


def main() -> None:
    fw = synthesis.synthesise(model.load(DEMO_PATH))
    only = sys.argv[1:] or ["tables", "build", "cortexm"]
    old = json.loads((Path(__file__).parent / "results.json").read_text()) if len(only) < 3 else {}
    results = {
        "model": "larkspur (bundled demo)",
        "current_lsb_a": fw.vehicle.firmware.current_lsb_a,
        "tables": bench_tables.run(fw) if "tables" in only else old["tables"],
        "build": build_time() if "build" in only else old["build"],
        "cortexm": bench_cortexm.run(fw) if "cortexm" in only else old["cortexm"],
    }
    out = Path(__file__).parent
    (out / "results.json").write_text(json.dumps(results, indent=2) + "\n")
    (out / "results.md").write_text(markdown(results))
    print(markdown(results))


def markdown(r: dict) -> str:
    t, b, c = r["tables"], r["build"], r["cortexm"]
    ex, nv, un = t["exhaustive"], t["naive256"], t["uniform"]
    oi, ei = t["ours_instructions"], t["exhaustive_instructions"]
    lines = [
        f"# Benchmarks on {r['model']}",
        "",
        "| measure | value |",
        "|---|---|",
        f"| feed-forward table bytes, our sizing for bytes | {t['ours_bytes']} |",
        f"| same, exhaustive search ({ex['combinations']:,} combinations, {ex['seconds']:.0f} s) | {ex['bytes']} |",
        f"| lookup instructions (cost model) / bytes, our sizing for instructions (the default, within "
        f"2048 bytes) | {oi['instructions']} / {oi['bytes']} |",
        f"| same, exhaustive search ({ei['combinations']:,} combinations, {ei['seconds']:.0f} s) | "
        f"{ei['instructions']} / {ei['bytes']} |",
        f"| feed-forward table bytes, naive 256 segments per piece | {nv['bytes']} "
        f"(bound {nv['bound_a'] * 1000:.2f} mA) |",
        f"| feed-forward table bytes, smallest single segment count for every piece ({un['segments']}) | "
        f"{un['bytes']} |",
        f"| forward-dynamics (M^-1) table bytes | {t['forward_bytes']} |",
        f"| end-to-end max error / budget ({t['points']:,} points) | {t['max_error_over_budget']:.3f} |",
        f"| proven bound / budget | {t['bound_over_budget']:.3f} |",
        f"| `kinetab build` wall time / `python -c 'import numpy'` | {b['ratio']:.1f} ({b['build_s']:.2f} s / "
        f"{b['import_numpy_s']:.3f} s) |",
        "",
        "| instructions per feed-forward call (both wheels) | median | max | flash bytes | est. cycles | "
        "worst error vs float model [mA] | differs from emulation |",
        "|---|---|---|---|---|---|---|",
    ]
    for key, label in (
        ("int_cortex_m0plus", "integer tables, Cortex-M0+"),
        ("float_soft_m0plus", "float, soft float, M0+"),
        ("int_cortex_m4", "integer tables, Cortex-M4"),
        ("float_fpu_m4f", "float, FPU, M4F"),
    ):
        x = c[key]
        err_ma = x["model_error_steps"] * r["current_lsb_a"] * 1000
        lines.append(
            f"| {label} | {x['median']:.0f} | {x['max']} | {x['flash']} | {x['cycles_est']:.0f} | "
            f"{err_ma:.2f} | {x['mismatches']} |"
        )
    m0 = c["float_soft_m0plus"]["median"] / c["int_cortex_m0plus"]["median"]
    lines += [
        "",
        f"Soft float / integer on M0+: {m0:.2f}x fewer instructions for the tables.",
        "Float baseline: tests/benchmarks/float_ff.c, float-only polynomial sinf/cosf/expf, reciprocals "
        "for constant divisions; its 'mismatches' are rounding differences against the integer result, "
        "expected and not an error (both stay within the budget of the float model). "
        "Cycle estimates use a per-class table (loads/stores 2, taken "
        "branches 2, push/pop 3-4, others 1) from the Arm technical reference manuals [memory].",
        "",
    ]
    return "\n".join(lines)


if __name__ == "__main__":
    main()
