"""Instructions per table-piece kind on Cortex-M (unicorn): the calibration of the sizing's cost model
(`sizing.piece_instructions_of`). Each kind is the generated C form (the `piece` macro of ff/ops.j2) in
its own function; the count is the call's instructions less an empty function's, median over inputs.
Writes tests/benchmarks/piece_cost_results.md and .json.

python tests/benchmarks/bench_piece_cost.py
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

from kinetab.generator import cview, render, sizing  # noqa: E402
from kinetab.generator import tables as tb  # noqa: E402

from tests import cortexm  # noqa: E402

HERE = Path(__file__).parent
SPAN = 1023  # inputs 0..SPAN, like a payload or speed table piece
KINDS = {  # kind -> (segments, shift)
    "constant": (0, 0),
    "direct": (SPAN + 1, 0),
    "one_segment": (1, 10),
    "interpolated": (16, 6),
}

SOURCE = """#include <stdint.h>
{% for name, p in pieces.items() %}
static const int16_t {{ p.array }}[{{ p.count }}] = { {{ p.entries }} };
void entry_{{ name }}(const int32_t *args, int32_t *out);
void entry_{{ name }}(const int32_t *args, int32_t *out)
{
    const int32_t x = args[0];
    (void)x;
    int32_t y;
    {
{{ gen.piece(None, p, "y") }}    }
    out[0] = y;
}
{% endfor %}
void entry_none(const int32_t *args, int32_t *out);
void entry_none(const int32_t *args, int32_t *out)
{
    out[0] = args[0];
}
"""


def _piece(name: str, segments: int, shift: int) -> dict[str, object]:
    """The view ops.j2's piece macro reads (as cview._piece_view makes it) for a smooth test function."""
    n = max(segments, 0) + 1
    xs = np.arange(n) << shift
    entries = np.round(12000 * np.sin(xs / 700.0)).astype(int)
    return {
        "array": f"tab_{name}",
        "count": n,
        "entries": ", ".join(str(int(e)) for e in entries),
        "x0": 0,
        "segments": segments,
        "shift": shift,
        "mask": f"0x{(1 << shift) - 1:X}",
        "half": (1 << (shift - 1)) if shift else 0,
        "constant": segments == 0,
        "wide": False,
        "split": False,
        "fold": cview._fold_view(tb.PieceData(segments, shift, entries)),
    }


def counts(target: str, compiler: str, opt: str) -> dict[str, float]:
    """Per kind: instructions of its entry (load x, the piece, store y) less the bare load and store."""
    env = render.environment()
    gen = env.get_template("ff/ops.j2").module
    pieces = {name: _piece(name, *spec) for name, spec in KINDS.items()}
    text = env.from_string(SOURCE).render(pieces=pieces, gen=gen)
    build = cortexm.compile_elf if compiler == "zig" else cortexm.compile_elf_gcc
    per = {}
    with tempfile.TemporaryDirectory() as tmp:
        src = Path(tmp) / "cost.c"
        src.write_text(text)
        for name in ["none", *KINDS]:
            elf = build([src], target, f"entry_{name}", Path(tmp) / f"{name}.elf", extra=[opt])
            m = cortexm.Machine.load(elf, target, count=True)
            xs = range(0, SPAN + 1, 37)
            per[name] = statistics.median(m.call(np.array([x], dtype="<i4").tobytes(), 4)[1] for x in xs)
    return {name: per[name] - per["none"] for name in KINDS}


def main() -> None:
    results = {}
    compilers = ["zig"] + (["gcc-arm-none-eabi"] if cortexm.arm_gcc_available() else [])
    for target in ("cortex_m0plus", "cortex_m4"):
        for compiler in compilers:
            results[f"{target}, {compiler} -Os"] = counts(target, compiler, "-Os")
    (HERE / "piece_cost_results.json").write_text(json.dumps(results, indent=2) + "\n")
    lines = [
        "# Instructions per table piece, by kind (median over inputs, less an empty call; unicorn)",
        "",
        "| core, compiler | " + " | ".join(KINDS) + " |",
        "|---|" + "---|" * len(KINDS),
        *(f"| {k} | " + " | ".join(f"{r[n]:.0f}" for n in KINDS) + " |" for k, r in results.items()),
        "",
        "Cost model used by the sizing: "
        + ", ".join(f"{k.value} {sizing.piece_instructions_of(k)}" for k in sizing.tb.PieceKind),
    ]
    (HERE / "piece_cost_results.md").write_text("\n".join(lines) + "\n")
    print("\n".join(lines))


if __name__ == "__main__":
    main()
