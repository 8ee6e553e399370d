"""Integer primitives shared by synthesis, emulation and analysis: rounding, saturation, Q formats.

Conventions (the generated C does exactly the same):
* rounding to nearest is "add half, arithmetic shift right": ties go toward +infinity;
* a value that does not fit its word saturates (and the caller is told), never wraps.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

WORD_BITS = {"int16": 16, "int32": 32}


def word_max(bits: int) -> int:
    """Largest value of a signed word of `bits` bits."""
    return (1 << (bits - 1)) - 1


def word_min(bits: int) -> int:
    return -(1 << (bits - 1))


def steps_within(limit: float, lsb: float) -> int:
    """Largest k with k * lsb <= limit, decided in float exactly as a reference computing k * lsb would."""
    k = math.floor(limit / lsb)
    while (k + 1) * lsb <= limit:
        k += 1
    while k > 0 and k * lsb > limit:
        k -= 1
    return k


def steps_covering(limit: float, lsb: float) -> int:
    """Smallest k with k * lsb >= limit: an envelope edge in steps that contains the stated limit, so an
    input of exactly the limit, rounded to steps, is never outside it."""
    k = math.ceil(limit / lsb)
    while k > 0 and (k - 1) * lsb >= limit:
        k -= 1
    while k * lsb < limit:
        k += 1
    return k


def shift_round(x: np.ndarray | int, shift: int) -> np.ndarray | int:
    """floor((x + 2^(shift-1)) / 2^shift) for shift > 0; x * 2^-shift for shift <= 0 (exact)."""
    if shift > 0:
        return (x + (1 << (shift - 1))) >> shift
    return x * (1 << -shift)


def quantise(values: np.ndarray, frac_bits: int, bits: int) -> tuple[np.ndarray, np.ndarray]:
    """Round values * 2^frac_bits to nearest (ties up) and saturate to the word; returns (ints, saturated)."""
    scaled = np.floor(np.asarray(values, dtype=float) * 2.0**frac_bits + 0.5)
    hi, lo = word_max(bits), word_min(bits)
    saturated = (scaled > hi) | (scaled < lo)
    return np.clip(scaled, lo, hi).astype(np.int64), saturated


def frac_bits_for(max_abs: float, bits: int) -> int:
    """Largest n with round(max_abs * 2^n) inside the word: the Q format that keeps most precision.

    At most bits + 32 fraction bits: a coefficient that is zero but for float noise (a difference of
    two equal coefficients, 1e-305) stores zeros instead of asking for an infinite shift."""
    if max_abs <= 0 or not math.isfinite(max_abs):
        return 0
    n = min(bits + 32, math.floor(math.log2(word_max(bits)) - math.log2(max_abs)))
    while math.floor(max_abs * 2.0**n + 0.5) > word_max(bits):
        n -= 1
    return n


def q_name(frac_bits: int, bits: int) -> str:
    """TI-style Qm.n (sign bit not counted in m) when both m and n are >= 0; otherwise the word and its
    step as a power of two (e.g. "int16 x 2^14"), since Q notation has no negative field widths."""
    m = bits - 1 - frac_bits
    if m >= 0 and frac_bits >= 0:
        return f"Q{m}.{frac_bits}"
    return f"int{bits} x 2^{-frac_bits}"


@dataclass(frozen=True)
class Interval:
    """A closed integer interval [lo, hi], for proving that no operation overflows."""

    lo: int
    hi: int

    def __add__(self, other: Interval) -> Interval:
        return Interval(self.lo + other.lo, self.hi + other.hi)

    def __neg__(self) -> Interval:
        return Interval(-self.hi, -self.lo)

    def __sub__(self, other: Interval) -> Interval:
        return self + (-other)

    def __mul__(self, other: Interval) -> Interval:
        c = (self.lo * other.lo, self.lo * other.hi, self.hi * other.lo, self.hi * other.hi)
        return Interval(min(c), max(c))

    def shift_round(self, shift: int) -> Interval:
        return Interval(int(shift_round(self.lo, shift)), int(shift_round(self.hi, shift)))

    def hull(self, other: Interval) -> Interval:
        return Interval(min(self.lo, other.lo), max(self.hi, other.hi))

    def magnitude(self) -> int:
        return max(abs(self.lo), abs(self.hi))

    def fits(self, bits: int) -> bool:
        return word_min(bits) <= self.lo and self.hi <= word_max(bits)
