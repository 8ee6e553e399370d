"""Table-size and accuracy benchmark (run by tests/benchmarks/run.py, results in results.md).

* our sizing (branch and bound) against an exhaustive search over every power-of-two size of every
  table piece (only sizes that are provably useless are left out: strictly dominated ones, and those
  that miss the budget even with every other table at its most accurate), enumerated in chunks;
* against a naive layout of 256 segments per piece, and the smallest single segment count for all;
* end-to-end max error / budget, proven bound / budget.
"""

from __future__ import annotations

import time

import numpy as np
from kinetab.generator import accuracy, analysis, program, synthesis
from kinetab.generator import tables as tb


def _units(des: program.Design, names: list[str]) -> list[tuple[str, int, list[int], list[float]]]:
    out = []
    for n in names:
        spec = des.specs[n]
        for k, piece in enumerate(spec.pieces):
            segs, errs, best = [], [], float("inf")
            for count in tb.candidate_segments(piece):
                e = tb.piece_error(spec, piece, tb.build_piece(spec, piece, count)).total
                if e < best:
                    segs.append(count)
                    errs.append(e)
                    best = e
            out.append((n, k, segs, errs))
    return out


def _merge(units, errs_per_unit):
    table: dict[str, object] = {}
    for (name, _, _, _), e in zip(units, errs_per_unit):
        table[name] = np.maximum(table[name], e) if name in table else e
    return table


def exhaustive(fw: synthesis.Firmware, chunk: int = 2_000_000) -> dict[str, float]:
    des = fw.design
    names = [n for n in des.specs if not n.startswith("minv")]
    units = _units(des, names)
    bound = analysis.compile_bound(des.feedforward, des.specs)
    budget = fw.vehicle.firmware.current_budget_a / fw.vehicle.firmware.current_lsb_a
    word = des.specs[names[0]].bits // 8
    best_err = [e[-1] for *_, e in units]
    kept = []
    for k, (_, _, segs, errs) in enumerate(units):
        trial = best_err[:k] + [np.array(errs)] + best_err[k + 1 :]
        ok = np.broadcast_to(bound(_merge(units, trial)), (len(errs),)) <= budget
        kept.append(([s for s, o in zip(segs, ok) if o], [e for e, o in zip(errs, ok) if o]))
    radix = np.array([len(s) for s, _ in kept], dtype=np.int64)
    total = int(np.prod(radix))
    strides = np.concatenate([[1], np.cumprod(radix[:-1])])
    err_tab = [np.array(e) for _, e in kept]
    byte_tab = [(np.array(s) + 1) * word for s, _ in kept]
    best = (np.inf, None)
    start = time.perf_counter()
    for lo in range(0, total, chunk):
        idx = np.arange(lo, min(total, lo + chunk), dtype=np.int64)
        digits = [(idx // strides[k]) % radix[k] for k in range(len(units))]
        size = sum(byte_tab[k][d] for k, d in enumerate(digits))
        feasible = bound(_merge(units, [err_tab[k][d] for k, d in enumerate(digits)])) <= budget
        if feasible.any():
            j = int(np.argmin(np.where(feasible, size, np.iinfo(np.int64).max)))
            if size[j] < best[0]:
                best = (int(size[j]), idx[j])
    return {"combinations": total, "seconds": time.perf_counter() - start, "bytes": best[0]}


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


def run(fw: synthesis.Firmware) -> dict[str, object]:
    ff_bytes = sum(fw.tables[n].bytes for n in fw.tables if not n.startswith("minv"))
    acc = accuracy.measure(fw)
    budget = fw.vehicle.firmware.current_budget_a
    return {
        "ours_bytes": ff_bytes,
        "forward_bytes": fw.total_bytes - ff_bytes,
        "exhaustive": exhaustive(fw),
        "naive256": naive(fw),
        "uniform": uniform(fw),
        "max_error_over_budget": acc.total.max / budget,
        "bound_over_budget": fw.ff_bound_a / budget,
        "points": acc.points,
    }
