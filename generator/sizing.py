"""Automatic table sizing: the cheapest tables whose proven end-to-end error bound meets the budget, by
the model's objective (`firmware.sizing`: lookup instructions, then bytes; or bytes alone).

Each table piece has a short list of candidate segment counts (constant, 1, 2, 4, ... up to one per input step,
each kept only if it lowers the measured error). A depth-first branch and bound over the pieces,
cheapest candidates first, finds the true optimum of that discrete problem: a branch is cut when
its cost by the objective cannot beat the best found, or when even the most accurate choices for the remaining
pieces would miss the budget (the bound grows with every table error, so this cut is safe).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from functools import partial
from typing import Any, assert_never

import numpy as np

from . import analysis
from . import tables as tb
from .errors import CheckFailed
from .ops import Program, op_table

Bound = Callable[[Mapping[str, Any]], Any]


def piece_instructions_of(kind: tb.PieceKind) -> int:
    """Instructions of one piece lookup by kind. Measured on Cortex-M0+ with zig and gcc-arm-none-eabi
    at -Os (both 0, 3, 6, 15; tests/benchmarks/bench_piece_cost.py); the constant counted as 1, the
    load of its value."""
    match kind:
        case tb.PieceKind.CONSTANT:
            return 1
        case tb.PieceKind.DIRECT:
            return 3
        case tb.PieceKind.ONE_SEGMENT:
            return 6
        case tb.PieceKind.INDEXED:
            return 15
        case _:
            assert_never(kind)


def piece_instructions(data: tb.PieceData) -> int:
    """Instructions of one lookup of a piece by its kind: constant, direct, one segment or indexed."""
    return piece_instructions_of(data.kind)


@dataclass(frozen=True)
class Objective:
    """What the search minimises within the budget: "bytes", or "instructions" then bytes, under a cap
    on the bytes of the tables being sized."""

    goal: str = "bytes"
    bytes_max: float = float("inf")
    ceiling: float = float("inf")  # look only for answers cheaper than this cost (NotCheaper when none is)


class NotCheaper(Exception):
    """No sizing within the budget and cap costs less than the objective's ceiling."""


BYTES = Objective()
INSTRUCTION_WEIGHT = 1 << 24  # above any table byte total: instructions decide, bytes break ties


@dataclass(frozen=True)
class PieceSizes:
    """One table piece's candidate sizes and what each costs: the unit the search chooses over."""

    table: str
    piece: int
    cands: tb.Candidates
    word_bytes: int
    lookups: int = 1  # how often the program looks the table up per call

    def bytes(self, k: int) -> int:
        return (self.cands.segments[k] + 1) * self.word_bytes

    def error(self, k: int) -> float:
        return self.cands.errors[k].total

    def instructions(self, k: int) -> int:
        """The cost model: instructions of this piece's lookups per call."""
        return piece_instructions(self.cands.data[k]) * self.lookups

    def cost(self, k: int, goal: str) -> int:
        return self.bytes(k) + (self.instructions(k) * INSTRUCTION_WEIGHT if goal == "instructions" else 0)


@dataclass(frozen=True)
class Sizing:
    tables: dict[str, tb.Table]
    errors: dict[str, tuple[tb.PieceError, ...]]
    bound_steps: float
    total_bytes: int
    visited: int
    instructions: int  # the cost model's lookup instructions per call of the sized tables
    over_cap: bool = False  # the budget needs more bytes than the cap: sized for fewest bytes instead


def pieces_to_size(
    specs: Mapping[str, tb.TableSpec], names: list[str], program: Program | None = None
) -> list[PieceSizes]:
    counts = {n: sum(1 for op in program.ops if op_table(op) == n) for n in names} if program else {}
    return [
        PieceSizes(
            table=n,
            piece=k,
            cands=tb.piece_candidates(specs[n], p),
            word_bytes=specs[n].bits // 8,
            lookups=max(1, counts.get(n, 1)),
        )
        for n in names
        for k, p in enumerate(specs[n].pieces)
    ]


def _merge(pieces: list[PieceSizes], choice: list, fixed: Mapping[str, float]) -> dict[str, Any]:
    errs: dict[str, Any] = dict(fixed)
    seen: set[str] = set()
    for u, e in zip(pieces, choice):
        errs[u.table] = np.maximum(errs[u.table], e) if u.table in seen else e
        seen.add(u.table)
    return errs


def search(
    bound: Bound, pieces: list[PieceSizes], budget: float, fixed: Mapping[str, float], *, objective: Objective = BYTES
) -> tuple[list[int] | None, int]:
    """Branch and bound: the candidate index per unit with the least cost and bound <= budget (and
    bytes <= the objective's cap).

    Units whose dearest candidate costs most are decided first: their choice moves the total most,
    so the cost cut prunes early (18 nodes instead of ~2,700 on the demo, sizing for bytes)."""
    order = sorted(range(len(pieces)), key=lambda k: -max(pieces[k].cost(c, objective.goal) for c in _all(pieces[k])))
    choice, visited = _search([pieces[k] for k in order], bound, budget, fixed, objective=objective)
    if choice is None:
        return None, visited
    out = [0] * len(pieces)
    for pos, k in enumerate(order):
        out[k] = choice[pos]
    return out, visited


def _cost(pieces: list[PieceSizes], choice: list[int], goal: str) -> int:
    """A choice's cost by the objective's goal."""
    return sum(u.cost(c, goal) for u, c in zip(pieces, choice))


def _all(u: PieceSizes) -> range:
    return range(len(u.cands.segments))


def _search(
    pieces: list[PieceSizes], bound: Bound, budget: float, fixed: Mapping[str, float], *, objective: Objective
) -> tuple[list[int] | None, int]:
    goal, cap = objective.goal, objective.bytes_max
    best_err = [u.error(len(u.cands.segments) - 1) for u in pieces]
    lowest = _lowest_feasible(bound, pieces, budget, fixed)
    if lowest is None:
        return None, 0
    # per unit, its feasible candidates cheapest first (with bytes, cost grows with the segment count)
    orders = [sorted(range(lo, len(u.cands.segments)), key=partial(u.cost, goal=goal)) for u, lo in zip(pieces, lowest)]
    rest_cost = _suffix([u.cost(o[0], goal) for u, o in zip(pieces, orders)])
    rest_bytes = _suffix([min(u.bytes(c) for c in o) for u, o in zip(pieces, orders)])
    best: dict[str, Any] = {"cost": float("inf"), "choice": None}
    fewest, visited = None, 0
    if goal == "instructions":  # the fewest bytes first (a short search): a start within the cap
        fewest, visited = _search(pieces, bound, budget, fixed, objective=BYTES)
        if fewest is None or sum(u.bytes(c) for u, c in zip(pieces, fewest)) > cap:
            return None, visited
    start = _greedy(bound, pieces, budget, fixed, objective=objective, start=fewest)
    best["cost"] = objective.ceiling
    if start is not None and _cost(pieces, start, goal) < objective.ceiling:
        best["cost"], best["choice"] = _cost(pieces, start, goal) + 1, start

    errs = [np.array([e.total for e in u.cands.errors]) for u in pieces]
    costs = [[u.cost(c, goal) for c in _all(u)] for u in pieces]
    sizes = [[u.bytes(c) for c in _all(u)] for u in pieces]
    choice = [0] * len(pieces)  # the path's candidate indices: entry k is set before going below k

    def dfs(k: int, chosen: list[float], used: int, used_bytes: int) -> None:
        """The cheapest answers below the units chosen so far (`chosen`: their errors)."""
        nonlocal visited
        visited += 1
        if k == len(pieces):
            best["cost"], best["choice"] = used, list(choice)
            return
        bounds = _each(bound(_merge(pieces, [*chosen, errs[k], *best_err[k + 1 :]], fixed)), errs[k].shape)
        for c in orders[k]:
            if used + costs[k][c] + rest_cost[k + 1] >= best["cost"]:
                break
            if bounds[c] <= budget and used_bytes + sizes[k][c] + rest_bytes[k + 1] <= cap:
                choice[k] = c
                dfs(k + 1, [*chosen, float(errs[k][c])], used + costs[k][c], used_bytes + sizes[k][c])

    dfs(0, [], 0, 0)
    return best["choice"], visited


def _each(bounds: Any, shape: tuple[int, ...]) -> np.ndarray:
    """The bound per candidate: as computed, or one value for all (a unit whose error no output sees)."""
    return bounds if np.shape(bounds) == shape else np.broadcast_to(bounds, shape)


def _suffix(values: list[int]) -> list[int]:
    """Sums of values[k:] for every k, and 0 past the end."""
    return [int(x) for x in np.concatenate([np.cumsum(values[::-1])[::-1], [0]])]


def _lowest_feasible(
    bound: Bound, pieces: list[PieceSizes], budget: float, fixed: Mapping[str, float]
) -> list[int] | None:
    """Per unit, its cheapest candidate that meets the budget with every other unit most accurate:
    no cheaper candidate can be part of any answer."""
    out = []
    padded = _padded_errors(pieces)
    trial = [_trial(pieces, k, len(u.cands.segments) - 1, padded=padded) for k, u in enumerate(pieces)]
    bounds = _each_unit(bound, pieces, trial, fixed)
    for k, u in enumerate(pieces):
        ok = np.flatnonzero(bounds[k, : len(u.cands.errors)] <= budget)
        if ok.size == 0:
            return None
        out.append(int(ok[0]))
    return out


def _greedy(
    bound: Bound,
    pieces: list[PieceSizes],
    budget: float,
    fixed: Mapping[str, float],
    *,
    objective: Objective,
    start: list[int] | None = None,
) -> list[int] | None:
    """A good first answer for the search to beat: from `start` (default: most accurate), keep taking the
    change to a cheaper candidate that saves the most while the bound still holds and the bytes stay
    within the cap (or, above it, do not grow); None when still over the cap. The search is exact
    either way: a good first answer only prunes sooner (on the demo, sizing for instructions: 1,806 nodes
    from the most accurate start, over the cap, against 243 + 1,066 from the fewest bytes)."""
    goal = objective.goal
    choice = list(start) if start is not None else [len(u.cands.segments) - 1 for u in pieces]
    if float(bound(_merge(pieces, [u.error(c) for u, c in zip(pieces, choice)], fixed))) > budget:
        return None
    costs = [[u.cost(c, goal) for c in _all(u)] for u in pieces]
    sizes = [[u.bytes(c) for c in _all(u)] for u in pieces]
    by_cost = [sorted(_all(u), key=cost.__getitem__) for u, cost in zip(pieces, costs)]
    padded = _padded_errors(pieces)
    trial = [_trial(pieces, k, choice[k], padded=padded) for k in range(len(pieces))]
    while True:
        moves = []
        total = sum(size[c] for size, c in zip(sizes, choice))
        bounds = _each_unit(bound, pieces, trial, fixed)
        for j, (cost, size) in enumerate(zip(costs, sizes)):
            now = cost[choice[j]]
            for c in (c for c in by_cost[j] if cost[c] < now):
                fits = total - size[choice[j]] + size[c] <= max(objective.bytes_max, total)
                if fits and bounds[j, c] <= budget:
                    moves.append((now - cost[c], j, c))
                    break  # the cheapest feasible change of this unit
        if not moves:
            break
        _, j, c = max(moves)
        choice[j], trial[j] = c, _trial(pieces, j, c, padded=padded)
    return choice if sum(u.bytes(c) for u, c in zip(pieces, choice)) <= objective.bytes_max else None


def _padded_errors(pieces: list[PieceSizes]) -> list[np.ndarray]:
    """Per unit, its candidates' errors, the last repeated up to the most any unit has (one 2-D call)."""
    width = max((len(u.cands.errors) for u in pieces), default=0)
    return [np.array([u.error(min(c, len(u.cands.errors) - 1)) for c in range(width)]) for u in pieces]


def _trial(pieces: list[PieceSizes], k: int, c: int, *, padded: list[np.ndarray]) -> np.ndarray:
    """Unit k's errors for _each_unit: all its candidates in row k, its candidate c in the other rows."""
    return np.where(np.arange(len(pieces))[:, None] == k, padded[k], pieces[k].error(c))


def _each_unit(
    bound: Bound, pieces: list[PieceSizes], trial: list[np.ndarray], fixed: Mapping[str, float]
) -> np.ndarray:
    """Row j: the bound with unit j at each of its candidates (columns), the others as chosen (`trial`:
    _trial per unit); all rows in one broadcast call (elementwise, so each value is the one a call per
    unit gives, ~13x fewer calls)."""
    shape = np.shape(trial[0]) if trial else (0, 0)
    return np.broadcast_to(bound(_merge(pieces, trial, fixed)), shape)


def limiting_table(bound: Bound, pieces: list[PieceSizes], fixed: Mapping[str, float]) -> tuple[float, str]:
    """The bound with every piece at its most accurate size, and the table whose error costs most."""
    best = [u.error(len(u.cands.segments) - 1) for u in pieces]
    full = float(bound(_merge(pieces, best, fixed)))
    gains = {}
    for name in {u.table for u in pieces}:
        trial = [0.0 if u.table == name else e for u, e in zip(pieces, best)]
        gains[name] = full - float(bound(_merge(pieces, trial, fixed)))
    floor = float(bound(_merge(pieces, [0.0] * len(pieces), fixed)))
    worst = max(gains, key=lambda n: gains[n]) if gains and max(gains.values()) > 0 else "(output rounding)"
    return full, worst if full - floor > 1e-12 else "(arithmetic rounding)"


def _choose(
    bound: Bound,
    pieces: list[PieceSizes],
    budget: float,
    fixed: Mapping[str, float],
    *,
    objective: Objective,
    what: str,
) -> tuple[list[int], int, bool]:
    """The search's choice, the nodes it visited and whether it had to leave the byte cap (fewest bytes
    then, if that costs less than a finite ceiling: NotCheaper when not), CheckFailed (naming the
    limiting table) when the budget cannot be met at all."""
    choice, visited = search(bound, pieces, budget, fixed, objective=objective)
    over_cap = False
    if choice is None and objective != BYTES:
        choice, more = search(bound, pieces, budget, fixed, objective=BYTES)
        visited, over_cap = visited + more, choice is not None
    ceiling = objective.ceiling
    if ceiling < float("inf") and (choice is None or _cost(pieces, choice, objective.goal) >= ceiling):
        raise NotCheaper(f"no sizing within the budget costs less than {objective.ceiling:g}")
    if choice is None:
        achievable, table = limiting_table(bound, pieces, fixed)
        raise CheckFailed(
            f"{what} cannot be met: the best achievable bound is {achievable:.4g} output steps "
            f"(limited by table '{table}') against a budget of {budget:.4g} steps"
        )
    return choice, visited, over_cap


def size(
    program: Program,
    specs: Mapping[str, tb.TableSpec],
    names: list[str],
    budget_steps: float,
    *,
    fixed: Mapping[str, tb.Table] | None = None,
    fixed_errors: Mapping[str, tuple[tb.PieceError, ...]] | None = None,
    what: str = "budget",
    objective: Objective = BYTES,
) -> Sizing:
    """Size the named tables (others fixed) so the program's error bound stays within budget_steps,
    minimising the objective; when its byte cap cannot hold what the budget needs, the fewest bytes
    (flagged over_cap). With a finite ceiling, NotCheaper instead when nothing under it meets the
    budget (within the cap, or else at its fewest bytes)."""
    fixed = dict(fixed or {})
    fixed_errors = dict(fixed_errors or {})
    fixed_max = {n: max(e.total for e in errs) for n, errs in fixed_errors.items()}
    pieces = pieces_to_size(specs, names, program)
    bound = analysis.compile_bound(program, specs)
    choice, visited, over_cap = _choose(bound, pieces, budget_steps, fixed_max, objective=objective, what=what)
    built: dict[str, list[tb.PieceData]] = {n: [] for n in names}
    errors: dict[str, list[tb.PieceError]] = {n: [] for n in names}
    for u, c in zip(pieces, choice):
        built[u.table].append(u.cands.data[c])
        errors[u.table].append(u.cands.errors[c])
    out_tables = {**fixed, **{n: tb.Table(specs[n], tuple(built[n])) for n in names}}
    out_errors = {**fixed_errors, **{n: tuple(errors[n]) for n in names}}
    final = float(bound(analysis.table_errors(out_tables, out_errors)))
    total = sum(out_tables[n].bytes for n in names)
    instructions = sum(u.instructions(c) for u, c in zip(pieces, choice))
    return Sizing(
        tables=out_tables,
        errors=out_errors,
        bound_steps=final,
        total_bytes=total,
        visited=visited,
        instructions=instructions,
        over_cap=over_cap,
    )
