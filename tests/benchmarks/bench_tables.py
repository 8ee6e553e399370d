"""Table-size and accuracy benchmark (run by tests/benchmarks/run.py, results in results.md).

* our sizing (branch and bound) against an exhaustive search over every power-of-two size of every
  table piece (only sizes that are provably useless are left out: strictly dominated ones, and those
  that miss the budget even with every other table at its most accurate), enumerated in chunks;
* against a naive layout of 256 segments per piece, and the smallest single segment count for all;
* end-to-end max error / budget, proven bound / budget.
"""

from __future__ import annotations

import dataclasses
import time

import numpy as np
from kinetab.generator import accuracy, analysis, program, sizing, synthesis
from kinetab.generator import tables as tb


def _units(des: program.Design, names: list[str]) -> list[tuple[str, int, list[int], list[float], list[int]]]:
    """Per table piece: every size more accurate than all cheaper ones, plus the direct size (one entry
    per input) when it is not less accurate; with each size's instructions per call (the cost model)."""
    out = []
    for n in names:
        spec = des.specs[n]
        lookups = sum(1 for op in des.feedforward.ops if getattr(op, "table", None) == n)
        for k, piece in enumerate(spec.pieces):
            segs, errs, instr, best = [], [], [], float("inf")
            for count in tb.candidate_segments(piece):
                data = tb.build_piece(spec, piece, count)
                e = tb.piece_error(spec, piece, data).total
                direct = count > 0 and data.shift == 0
                if e < best or (direct and e <= best):
                    segs.append(count)
                    errs.append(e)
                    instr.append(sizing.piece_instructions(data) * lookups)
                    best = min(best, e)
            out.append((n, k, segs, errs, instr))
    return out


def _merge(units, errs_per_unit):
    table: dict[str, object] = {}
    for (name, *_), e in zip(units, errs_per_unit):
        table[name] = np.maximum(table[name], e) if name in table else e
    return table


def exhaustive(fw: synthesis.Firmware, goal: str = "bytes", chunk: int = 2_000_000) -> dict[str, float]:
    """The least-cost feasible combination of feed-forward table sizes by enumeration: fewest bytes, or
    fewest instructions then bytes within firmware.table_bytes_max bytes."""
    des = fw.design
    names = [n for n in des.specs if not n.startswith("minv")]
    units = _units(des, names)
    bound = analysis.compile_bound(des.feedforward, des.specs)
    budget = fw.vehicle.firmware.current_budget_a / fw.vehicle.firmware.current_lsb_a
    cap = fw.vehicle.firmware.table_bytes_max if goal == "instructions" else np.inf
    word = des.specs[names[0]].bits // 8
    best_err = [u[3][-1] for u in units]
    kept = []
    for k, (_, _, segs, errs, instr) in enumerate(units):
        trial = best_err[:k] + [np.array(errs)] + best_err[k + 1 :]
        ok = np.broadcast_to(bound(_merge(units, trial)), (len(errs),)) <= budget
        kept.append([(s_, e, i) for s_, e, i, o in zip(segs, errs, instr, ok) if o])
    radix = np.array([len(c) for c in kept], dtype=np.int64)
    total = int(np.prod(radix))
    strides = np.concatenate([[1], np.cumprod(radix[:-1])])
    err_tab = [np.array([e for _, e, _ in c]) for c in kept]
    byte_tab = [np.array([(s_ + 1) * word for s_, _, _ in c]) for c in kept]
    instr_tab = [np.array([i for _, _, i in c]) for c in kept]
    weight = sizing.INSTRUCTION_WEIGHT if goal == "instructions" else 0
    best = (np.inf, 0, 0)
    start = time.perf_counter()
    for lo in range(0, total, chunk):
        idx = np.arange(lo, min(total, lo + chunk), dtype=np.int64)
        digits = [(idx // strides[k]) % radix[k] for k in range(len(units))]
        size = sum(byte_tab[k][d] for k, d in enumerate(digits))
        instr = sum(instr_tab[k][d] for k, d in enumerate(digits))
        cost = instr * weight + size
        feasible = (bound(_merge(units, [err_tab[k][d] for k, d in enumerate(digits)])) <= budget) & (size <= cap)
        if feasible.any():
            j = int(np.argmin(np.where(feasible, cost, np.iinfo(np.int64).max)))
            if cost[j] < best[0]:
                best = (int(cost[j]), int(size[j]), int(instr[j]))
    return {"combinations": total, "seconds": time.perf_counter() - start, "bytes": best[1], "instructions": best[2]}


def naive(fw: synthesis.Firmware, segments: int = 256) -> dict[str, float]:
    des = fw.design
    names = [n for n in des.specs if not n.startswith("minv")]
    errs, size = {}, 0
    for n in names:
        spec = des.specs[n]
        worst = 0.0
        for piece in spec.pieces:
            count = min(segments, tb.candidate_segments(piece)[-1])
            data = tb.build_piece(spec, piece, count)
            worst = max(worst, tb.piece_error(spec, piece, data).total)
            size += len(data.entries) * spec.bits // 8
        errs[n] = worst
    b = float(analysis.error_bound(des.feedforward, des.specs, errs)) * fw.vehicle.firmware.current_lsb_a
    return {"bytes": size, "bound_a": b}


def uniform(fw: synthesis.Firmware) -> dict[str, float]:
    """Smallest single power-of-two segment count that every table piece uses (capped at exact)."""
    for exp in range(0, 13):
        r = naive(fw, 1 << exp)
        if r["bound_a"] <= fw.vehicle.firmware.current_budget_a:
            return {"segments": 1 << exp, **r}
    return {"segments": None, "bytes": None, "bound_a": None}


def ff_instructions(fw: synthesis.Firmware) -> int:
    """The cost model's lookup instructions per feed-forward call for the chosen table sizes."""
    total = 0
    for op in fw.design.feedforward.ops:
        table = getattr(op, "table", None)
        if table is not None:
            total += sum(sizing.piece_instructions(d) for d in fw.tables[table].pieces)
    return total


def run(fw: synthesis.Firmware) -> dict[str, object]:
    """fw sized for instructions (the default); its twin sized for bytes; each against exhaustive search."""
    v = fw.vehicle
    by_bytes = synthesis.synthesise(dataclasses.replace(v, firmware=dataclasses.replace(v.firmware, sizing="bytes")))

    def ff_bytes(f: synthesis.Firmware) -> int:
        return sum(f.tables[n].bytes for n in f.tables if not n.startswith("minv"))

    acc = accuracy.measure(fw)
    budget = v.firmware.current_budget_a
    return {
        "ours_bytes": ff_bytes(by_bytes),
        "exhaustive": exhaustive(by_bytes, "bytes"),
        "ours_instructions": {"bytes": ff_bytes(fw), "instructions": ff_instructions(fw)},
        "exhaustive_instructions": exhaustive(fw, "instructions"),
        "forward_bytes": fw.total_bytes - ff_bytes(fw),
        "naive256": naive(fw),
        "uniform": uniform(fw),
        "max_error_over_budget": acc.total.max / budget,
        "bound_over_budget": fw.ff_bound_a / budget,
        "points": acc.points,
    }
