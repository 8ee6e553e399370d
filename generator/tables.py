"""Lookup tables: uniform power-of-two segments, shift-and-mask indexing, bit-exact lookup, errors.

A table maps one clamped integer input to an integer in its Q format. It has one or two pieces
(the friction tables split exactly at the deadband edge so no segment straddles the step or kink, or
where the Stribeck dip has faded) and a symmetry: odd and even tables store |x| only.
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable
from dataclasses import dataclass, field
from enum import Enum
from typing import assert_never

import numpy as np

from . import fixedpoint as fx
from .errors import CheckFailed

Func = Callable[[np.ndarray], np.ndarray]
EXHAUSTIVE_POINTS = 1 << 21
MAX_SEGMENTS = 4096


@dataclass(frozen=True)
class Piece:
    """A smooth part of a table's function on the integer inputs x0..x1 (of |x| for symmetric tables)."""

    x0: int
    x1: int
    func: Func  # float target value at integer inputs, smooth also a little past x1
    label: str = ""
    slack: float = 0.0  # a bound of what func leaves out (a factor held at its midrange), target units

    @property
    def span(self) -> int:
        return self.x1 - self.x0


@dataclass(frozen=True)
class TableSpec:
    """Everything about a table except its segment counts: those the sizing picks."""

    name: str
    source: str  # the clamped input signal it is indexed by
    symmetry: str  # "none", "odd" or "even"
    pieces: tuple[Piece, ...]
    frac_bits: int
    bits: int
    unit: str  # what one stored step means, for the C comment
    meaning: str  # the model quantity it holds
    max_abs: float  # largest |value| over the extended domain, target units
    si_scale: float = 1.0  # SI value = target value * si_scale
    si_unit: str = "1"
    model_keys: tuple[str, ...] = ()  # the model keys its values come from, for its C comment

    @property
    def piece_edge(self) -> int | None:
        """The last input of the first piece when there are two (the deadband or Stribeck edge), else None."""
        return self.pieces[0].x1 if len(self.pieces) == 2 else None


class PieceKind(Enum):
    """How a piece is looked up; each concern (emulate, prove, cost, C) matches on it exhaustively."""

    CONSTANT = "constant"  # one entry, whatever the input
    DIRECT = "direct"  # one entry per input step, no interpolation
    ONE_SEGMENT = "one segment"  # two entries: the clamped input never reaches the next breakpoint
    INDEXED = "indexed"  # segments of 2^shift steps, shift-and-mask index, interpolation


@dataclass(frozen=True)
class PieceData:
    segments: int  # 0: one constant entry
    shift: int  # log2 of the segment width in input steps
    entries: np.ndarray  # int64, segments + 1 entries (1 when constant)
    saturated: bool = False

    @property
    def mask(self) -> int:
        return (1 << self.shift) - 1

    @property
    def kind(self) -> PieceKind:
        if self.segments == 0:
            return PieceKind.CONSTANT
        if self.shift == 0:
            return PieceKind.DIRECT
        return PieceKind.ONE_SEGMENT if self.segments == 1 else PieceKind.INDEXED


@dataclass(frozen=True)
class Table:
    spec: TableSpec
    pieces: tuple[PieceData, ...]

    @property
    def entry_count(self) -> int:
        return sum(len(p.entries) for p in self.pieces)

    @property
    def bytes(self) -> int:
        return self.entry_count * self.spec.bits // 8


def extended_end(piece: Piece) -> int:
    """Largest input any segment count may place a breakpoint at (N * 2^s <= 2 span + 2)."""
    return piece.x0 + 2 * piece.span + 2


def make_spec(
    name: str,
    source: str,
    symmetry: str,
    pieces: tuple[Piece, ...],
    *,
    bits: int,
    unit: str,
    meaning: str,
    si_scale: float = 1.0,
    si_unit: str = "1",
    model_keys: tuple[str, ...] = (),
) -> TableSpec:
    """Choose the Q format from the value range over every breakpoint any size could use."""
    peak, sampled = 0.0, False
    for p in pieces:
        end = extended_end(p)
        if end - p.x0 + 1 <= EXHAUSTIVE_POINTS:  # every input a breakpoint could sit on
            xs = np.arange(p.x0, end + 1, dtype=np.int64)
        else:
            xs = np.linspace(p.x0, end, EXHAUSTIVE_POINTS).round().astype(np.int64)  # spacing > 1: distinct
            sampled = True
        values = p.func(xs)
        if not np.all(np.isfinite(values)):
            raise CheckFailed(f"table {name}: the model gives a non-finite value on {p.label or 'its range'}")
        peak = max(peak, float(np.max(np.abs(values))))
    if sampled:
        peak *= 1.01  # sampled: leave room for a peak between samples
    return TableSpec(
        name=name,
        source=source,
        symmetry=symmetry,
        pieces=pieces,
        frac_bits=fx.frac_bits_for(peak, bits),
        bits=bits,
        unit=unit,
        meaning=meaning,
        max_abs=peak,
        si_scale=si_scale,
        si_unit=si_unit,
        model_keys=model_keys,
    )


def shift_for(span: int, segments: int) -> int:
    """Smallest s with segments * 2^s > span, so index = (x - x0) >> s stays below `segments`."""
    s = 0
    while segments << s <= span:
        s += 1
    return s


def candidate_segments(piece: Piece) -> list[int]:
    """0 (constant), powers of two while a segment spans more than one input step, then the direct
    size: one entry per input step (span + 1 segments of 1 step, no interpolation)."""
    out = [0]
    n = 1
    while n <= MAX_SEGMENTS and shift_for(piece.span, n) > 0:
        out.append(n)
        n *= 2
    if piece.span + 1 <= MAX_SEGMENTS:
        out.append(piece.span + 1)
    return out


def build_piece(spec: TableSpec, piece: Piece, segments: int) -> PieceData:
    """Breakpoint values rounded to the Q format; a constant piece stores the midrange value."""
    if segments == 0:
        xs = domain(piece)
        vals = piece.func(xs)
        mid = np.array([(float(np.max(vals)) + float(np.min(vals))) / 2])
        ints, sat = fx.quantise(mid, spec.frac_bits, spec.bits)
        return PieceData(segments=0, shift=0, entries=ints, saturated=bool(sat.any()))
    s = shift_for(piece.span, segments)
    xs = piece.x0 + (np.arange(segments + 1, dtype=np.int64) << s)
    values = piece.func(xs)
    ints, sat = fx.quantise(values, spec.frac_bits, spec.bits)
    if sat.any():  # the Q format comes from the range, so this means the range estimate was wrong
        k = int(np.argmax(sat))
        raise CheckFailed(
            f"table {spec.name}: value {values[k] * spec.si_scale:.6g} {spec.si_unit} at input "
            f"{int(xs[k])} does not fit {fx.q_name(spec.frac_bits, spec.bits)}"
        )
    return PieceData(segments=segments, shift=s, entries=ints, saturated=False)


def build(spec: TableSpec, segments: tuple[int, ...]) -> Table:
    return Table(spec, tuple(build_piece(spec, p, n) for p, n in zip(spec.pieces, segments)))


def lookup_piece(data: PieceData, x0: int, x: np.ndarray) -> np.ndarray:
    """Bit-exact interpolation: e[i] + (((e[i+1] - e[i]) * frac + half) >> s), int64 arithmetic."""
    e = data.entries
    d = np.asarray(x, dtype=np.int64) - x0
    match data.kind:
        case PieceKind.CONSTANT:
            return np.full(np.shape(x), e[0], dtype=np.int64)
        case PieceKind.DIRECT:
            return e[d]
        case PieceKind.ONE_SEGMENT:
            return e[0] + fx.shift_round((e[1] - e[0]) * d, data.shift)
        case PieceKind.INDEXED:
            idx = d >> data.shift
            lo = e[idx]
            return lo + fx.shift_round((e[idx + 1] - lo) * (d & data.mask), data.shift)
        case _:
            assert_never(data.kind)


def lookup(table: Table, x: np.ndarray) -> np.ndarray:
    """The table's integer output for clamped integer inputs (symmetry and pieces applied)."""
    x = np.asarray(x, dtype=np.int64)
    spec = table.spec
    ax = np.abs(x) if spec.symmetry != "none" else x
    y = np.zeros(np.shape(x), dtype=np.int64)
    for piece, data, mask in zip(spec.pieces, table.pieces, _masks(spec, ax)):
        y = np.where(mask, lookup_piece(data, piece.x0, np.clip(ax, piece.x0, piece.x1)), y)
    return np.where(x < 0, -y, y) if spec.symmetry == "odd" else y


def _masks(spec: TableSpec, ax: np.ndarray) -> list[np.ndarray]:
    """Which piece serves each |x|: the split is exact at the first piece's last input."""
    if len(spec.pieces) == 1:
        return [np.ones(np.shape(ax), dtype=bool)]
    low = ax <= spec.pieces[0].x1
    return [low, ~low]


def lookup_real(table: Table, x: np.ndarray, mode: str) -> np.ndarray:
    """Real-valued counterpart in integer units, for the error split.

    mode "model": the function itself; "interp": interpolation of unrounded breakpoints;
    "quant": interpolation of the stored (rounded) entries without the lookup's own rounding.
    """
    x = np.asarray(x, dtype=np.int64)
    spec = table.spec
    ax = np.abs(x) if spec.symmetry != "none" else x
    out = np.zeros(np.shape(x), dtype=float)
    for piece, data, mask in zip(spec.pieces, table.pieces, _masks(spec, ax)):
        xs = np.clip(ax, piece.x0, piece.x1)
        if mode == "model":
            vals = piece.func(xs) * 2.0**spec.frac_bits
        else:
            vals = _interp_real(spec, piece, data, xs, quantised=(mode == "quant"))
        out = np.where(mask, vals, out)
    return np.where(x < 0, -out, out) if spec.symmetry == "odd" else out


def _interp_real(spec: TableSpec, piece: Piece, data: PieceData, xs: np.ndarray, *, quantised: bool) -> np.ndarray:
    """The piece without rounding: its stored entries (quantised) or the function at its breakpoints,
    interpolated; a constant piece's value (stored, or the function's midrange)."""
    match data.kind:
        case PieceKind.CONSTANT:
            value = data.entries[0] if quantised else _constant_real(spec, piece)
            return np.full(np.shape(xs), float(value))
        case PieceKind.DIRECT | PieceKind.ONE_SEGMENT | PieceKind.INDEXED:
            bx = piece.x0 + (np.arange(data.segments + 1, dtype=np.int64) << data.shift)
            ys = data.entries.astype(float) if quantised else piece.func(bx) * 2.0**spec.frac_bits
            return np.interp(xs.astype(float), bx.astype(float), ys)
        case _:
            assert_never(data.kind)


def _constant_real(spec: TableSpec, piece: Piece) -> float:
    vals = piece.func(domain(piece))
    return (float(np.max(vals)) + float(np.min(vals))) / 2 * 2.0**spec.frac_bits


def domain(piece: Piece) -> np.ndarray:
    """The piece's integer inputs: all of them, or an even sample of EXHAUSTIVE_POINTS when more."""
    if piece.span + 1 <= EXHAUSTIVE_POINTS:
        return np.arange(piece.x0, piece.x1 + 1, dtype=np.int64)
    return np.linspace(piece.x0, piece.x1, EXHAUSTIVE_POINTS).round().astype(np.int64)  # spacing > 1: distinct


def sample_margin(xs: np.ndarray, values: np.ndarray) -> float:
    """How much more than at the samples `xs` a difference of two functions can reach between them: at
    most gap * (|f'| + |p'|), each slope taken as the steepest sampled one (so twice it)."""
    gap = float(np.max(np.diff(xs)))
    return gap * float(np.max(np.abs(np.diff(values)) / np.diff(xs))) * 2


@dataclass(frozen=True)
class PieceError:
    """Worst |table - function| over the piece's inputs, in target units, and its parts."""

    total: float
    interpolation: float
    where: int
    exhaustive: bool


def piece_error(
    spec: TableSpec, piece: Piece, data: PieceData, values: tuple[np.ndarray, np.ndarray] | None = None
) -> PieceError:
    """Evaluate the bit-exact lookup against the function on every input (or a dense sample + margin).

    values: the inputs and the function's values there, when the caller already has them."""
    xs, exact = values if values is not None else (domain(piece), None)
    exact = piece.func(xs) if exact is None else exact
    got = lookup_piece(data, piece.x0, xs).astype(float) / 2.0**spec.frac_bits
    real = _interp_real(spec, piece, data, xs, quantised=False) / 2.0**spec.frac_bits
    err = np.abs(got - exact)
    k = int(np.argmax(err))
    exhaustive = piece.span + 1 <= EXHAUSTIVE_POINTS
    margin = 0.0 if exhaustive else sample_margin(xs, exact)
    return PieceError(
        total=float(err[k]) + margin + piece.slack,
        interpolation=float(np.max(np.abs(real - exact))) + margin + piece.slack,
        where=int(xs[k]),
        exhaustive=exhaustive,
    )


@dataclass
class Candidates:
    """Per piece: candidate segment counts with their bytes and measured errors (non-dominated only)."""

    segments: list[int] = field(default_factory=list)
    errors: list[PieceError] = field(default_factory=list)
    data: list[PieceData] = field(default_factory=list)


KEEP_RATIO = 0.9  # a larger size is a candidate only if it cuts the worst error by 10 % or more


_CANDIDATES: dict[tuple[object, ...], Candidates] = {}
CANDIDATES_KEPT = 64  # memo entries (oldest dropped first): a synthesis needs a few dozen (the demo 27)


def piece_candidates(spec: TableSpec, piece: Piece) -> Candidates:
    """piece_candidates_of, remembered: synthesis sizes the same piece (new objects, the same function)
    in every design and layout it tries (on the demo, 104 calls for 27 distinct pieces)."""
    key = _candidates_key(spec, piece)
    if key is None:
        return piece_candidates_of(spec, piece)
    if key not in _CANDIDATES:
        if len(_CANDIDATES) >= CANDIDATES_KEPT:
            del _CANDIDATES[next(iter(_CANDIDATES))]
        made = piece_candidates_of(spec, piece)
        for data in made.data:  # shared by every later caller: read-only, so no one can spoil them
            data.entries.flags.writeable = False
        _CANDIDATES[key] = made
    out = _CANDIDATES[key]
    return Candidates(segments=list(out.segments), errors=list(out.errors), data=list(out.data))


def _candidates_key(spec: TableSpec, piece: Piece) -> tuple[object, ...] | None:
    """All the candidates depend on: the format, the piece's ends and slack, and the function's values at
    every input a breakpoint may sit on (its digest); None (no memo) for a piece too long to evaluate so."""
    end = extended_end(piece)
    if end - piece.x0 + 1 > EXHAUSTIVE_POINTS:
        return None
    values = np.ascontiguousarray(piece.func(np.arange(piece.x0, end + 1, dtype=np.int64)))
    digest = hashlib.blake2b(values.tobytes(), digest_size=16).digest()
    where = (spec.name, spec.si_scale, spec.si_unit)  # named in build_piece's error
    return (*where, spec.frac_bits, spec.bits, piece.x0, piece.x1, piece.slack, values.dtype.str, digest)


def piece_candidates_of(spec: TableSpec, piece: Piece) -> Candidates:
    """Every useful size: each kept one is at least 10 % more accurate than the cheaper ones, or the
    direct table (one entry per input), whose lookup costs fewer instructions than interpolation."""
    out = Candidates()
    best = float("inf")
    xs = domain(piece)
    values = (xs, piece.func(xs))
    for n in candidate_segments(piece):
        data = build_piece(spec, piece, n)
        err = piece_error(spec, piece, data, values)
        direct = data.kind is PieceKind.DIRECT  # one entry per input: the cheapest lookup but one
        measured = err.total - piece.slack  # the held factor's reach is the same for every size
        if measured < KEEP_RATIO * best or (direct and measured <= best):
            out.segments.append(n)
            out.errors.append(err)
            out.data.append(data)
            best = measured
    return out
