"""Work a build reuses instead of redoing gives exactly what doing it afresh gives: table piece candidates
remembered across designs (generator/tables.py, piece_candidates) and neighbouring-input rows evaluated
once each (generator/steps.py, _distinct). The reference is the computation without the reuse."""

from __future__ import annotations

import numpy as np
import pytest
from kinetab.generator import steps
from kinetab.generator import tables as tb


def _spec(piece: tb.Piece, *, bits: int = 16) -> tb.TableSpec:
    return tb.make_spec("t", "x", "none", (piece,), bits=bits, unit="1", meaning="a test curve")


def _same(a: tb.Candidates, b: tb.Candidates) -> bool:
    return (
        a.segments == b.segments
        and [e.total for e in a.errors] == [e.total for e in b.errors]
        and all(np.array_equal(x.entries, y.entries) for x, y in zip(a.data, b.data))
    )


def _curve(x: np.ndarray) -> np.ndarray:
    return 1000.0 * np.sin(np.asarray(x, float) / 40.0)


def _bent_past_the_end(x: np.ndarray) -> np.ndarray:
    """_curve on 0..100, another curve past 100 (where a coarse size's last breakpoint may sit)."""
    x = np.asarray(x, float)
    return np.where(x <= 100, _curve(x), _curve(x) + 5.0 * (x - 100))


@pytest.mark.parametrize(
    "variant",
    [
        tb.Piece(0, 100, _bent_past_the_end),  # the same on the piece, not past it
        tb.Piece(0, 100, _curve, slack=3.0),  # a held factor's reach
        tb.Piece(0, 99, _curve),  # one input shorter
    ],
)
def test_remembered_candidates_are_the_ones_computed_afresh(variant):
    """A piece remembered first must not answer for a piece that differs only where the candidates
    still look (past x1, up to tables.extended_end), in its slack or in its ends; each answer equals
    piece_candidates_of's, with nothing remembered."""
    base = tb.Piece(0, 100, _curve)
    spec, other = _spec(base), _spec(variant)
    first = tb.piece_candidates(spec, base)
    second = tb.piece_candidates(other, variant)
    assert _same(first, tb.piece_candidates_of(spec, base))
    assert _same(second, tb.piece_candidates_of(other, variant))
    assert not _same(first, second)


def test_a_remembered_answer_cannot_be_spoilt_by_its_caller():
    """The lists handed out are the caller's own, and the shared table entries are read-only."""
    piece = tb.Piece(0, 100, _curve)
    spec = _spec(piece)
    got = tb.piece_candidates(spec, piece)
    got.segments.clear()
    with pytest.raises(ValueError):
        got.data[-1].entries[0] += 1
    assert _same(tb.piece_candidates(spec, piece), tb.piece_candidates_of(spec, piece))


def test_neighbour_rows_evaluated_once_each_and_never_merged_when_keys_collide(monkeypatch):
    """steps._distinct: every row is some distinct row, each distinct row once (numpy's unique rows as the
    reference); when two different rows share a key (a factor of 0 keys by the first column alone), no
    row is merged."""
    rows = np.array([[1, 2, 3], [4, 5, 6], [1, 2, 3], [-7, 5, 6], [4, 5, 6], [4, 5, -6]], dtype=np.int64)
    distinct, back = steps._distinct(rows)
    assert np.array_equal(distinct[back], rows) and len(distinct) == len(np.unique(rows, axis=0)) == 4
    monkeypatch.setattr(steps, "_HASH_FACTOR", np.uint64(0))
    distinct, back = steps._distinct(rows)
    assert np.array_equal(distinct, rows) and np.array_equal(back, np.arange(len(rows)))
