"""Which fit coordinates the logs determine, from the whole regressor at once.

The columns are scaled by each coordinate's typical size; a direction of the scaled regressor
(an eigenvector of X^T X) is weak when its HAC standard error exceeds REL_TOL of that size, or its
singular value is numerically zero. A weak direction that involves an efficiency is a scale
ambiguity (only a known force, such as a payload, fixes how current turns into force): that
efficiency is held. The coordinates that the remaining weak directions involve form groups (linked
through the projector onto the weak subspace); each group is held at the model's values, and the
combinations of it that the data does determine (the complement of the weak subspace within the
group) are fitted and reported instead.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import fitparams as fp

REL_TOL = 0.05  # a direction known to worse than 5 % (one standard error) of its size is not determined
NUMERIC_TOL = 1e-7  # singular values below this fraction of the largest are zero. They come from the
# eigenvalues of X^T X, whose rounding is about eps times the largest, so an exact null reads as up to
# sqrt(eps) ~ 1.5e-8 (measured 5e-9 to 2e-8 on the flat scale of a fit without a payload; at 1e-9 it
# read as known, its HAC error 0/0 ~ 0, and mass, Coulomb and both efficiencies were held together)
NULL_SE = 1e6  # the standard error given to a numerically null direction
TANGLED = REL_TOL / 3  # a coordinate whose standard error from a weak direction passes this is in its group
NULL_LOADING = 0.05  # a loading on a null direction that makes a coordinate part of its group


@dataclass(frozen=True)
class Group:
    """Coordinates held together; `combos` (|members| x k, scaled coordinates) spans what is determined."""

    members: tuple[int, ...]
    combos: np.ndarray
    why: str


@dataclass(frozen=True)
class Verdict:
    free: list[int]
    groups: list[Group]


def direction_errors(gram: np.ndarray, omega: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(singular values, eigenvectors as columns, HAC standard error along each) of X with X^T X = gram."""
    s2, vecs = np.linalg.eigh(gram)
    s2 = np.maximum(s2, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.sqrt(np.maximum(np.einsum("ik,ij,jk->k", vecs, omega, vecs), 0.0)) / s2
    se = np.where((s2 > 0) & np.isfinite(se), se, np.inf)
    return np.sqrt(s2), vecs, se


def _weak(s: np.ndarray, se: np.ndarray) -> np.ndarray:
    return (s <= NUMERIC_TOL * max(float(s.max()), 1e-300)) | ~(se <= REL_TOL)


def _members(vec: np.ndarray, se: float, null: bool) -> set[int]:
    """The coordinates a weak direction tangles: any visible loading on a null direction; on a merely
    weak one, a loading of 0.2 or more that carries more than TANGLED of error."""
    if null:
        return {k for k in range(len(vec)) if abs(vec[k]) > NULL_LOADING}
    return {k for k in range(len(vec)) if abs(vec[k]) >= 0.2 and abs(vec[k]) * se > TANGLED}


def _merge(sets: list[set[int]]) -> list[list[int]]:
    """Union of overlapping sets."""
    out: list[set[int]] = []
    for s in sets:
        joined = [o for o in out if o & s]
        for o in joined:
            out.remove(o)
            s = s | o
        out.append(s)
    return [sorted(s) for s in out]


def _group(members: list[int], null: np.ndarray, se_pct: float) -> Group:
    """A held group: its null part (rows of the weak basis) and the determined complement."""
    u, sv, _ = np.linalg.svd(null, full_matrices=True)
    rank = int(np.sum(sv > 1e-3))
    combos = u[:, rank:]
    if combos.shape[1] == 0 and len(members) == 1:
        why = (
            "not excited by these logs"
            if se_pct >= 100 * NULL_SE / 10
            else f"barely excited by these logs (they would fix it only to +-{se_pct:.2g} %)"
        )
    else:
        why = "cannot be told apart by these logs"
    return Group(tuple(members), combos, why)


def classify(gram: np.ndarray, omega: np.ndarray) -> Verdict:
    """gram = Xs^T Xs and omega = the HAC long-run covariance of the scores, both of the scaled columns
    of every fit coordinate; returns the free coordinates and the held groups."""
    cand, groups = [], []
    for j in range(gram.shape[0]):  # a coordinate the logs would not fix even if all else were known
        alone = np.sqrt(max(omega[j, j], 0.0)) / gram[j, j] if gram[j, j] > 0 else np.inf
        if gram[j, j] <= (NUMERIC_TOL**2) * float(np.max(np.diag(gram))) or not alone <= REL_TOL:
            why = (
                "not excited by these logs"
                if not np.isfinite(alone) or alone > 1
                else (f"barely excited by these logs (they would fix it only to +-{100 * alone:.2g} %)")
            )
            groups.append(Group((j,), np.zeros((1, 0)), why))
        else:
            cand.append(j)
    for _ in range(gram.shape[0]):
        if not cand:
            break
        sub = np.ix_(cand, cand)
        s, vecs, se = direction_errors(gram[sub], omega[sub])
        weak = _weak(s, se)
        if not weak.any():
            break
        null = vecs[:, weak]
        is_null = s[weak] <= NUMERIC_TOL * max(float(s.max()), 1e-300)
        # a numerically null direction is unknown whatever its HAC error: exact nulls in the scores give
        # 0/0 there (a flat scale, currents compared in their own terms, read as known: no scale held)
        capped = np.where(is_null, NULL_SE, np.minimum(se[weak], NULL_SE))
        share = (null**2) @ capped**2  # each coordinate's variance from the weak directions
        # tangled as a group member would be (TANGLED): the scale is not exactly flat where mass and the
        # rolling resistances multiply, so it can be merely weak, and a member's share of a weak
        # direction's error is below REL_TOL (a board's logs held mass, Coulomb and both efficiencies)
        scale_side = [k for k, j in enumerate(cand) if fp.NAMES[j] in fp.MEASURED_SIDE and share[k] > TANGLED**2]
        if scale_side:  # hold the motoring efficiency (the datasheet's number) first: it sets the scale
            k = min(scale_side, key=lambda k: fp.MEASURED_SIDE.index(fp.NAMES[cand[k]]))
            groups.append(Group((cand[k],), np.zeros((1, 0)), "scale"))
            cand.pop(k)
            continue
        sets = [_members(null[:, q], float(capped[q]), bool(is_null[q])) for q in range(null.shape[1])]
        sets = [m or {int(np.argmax(np.abs(null[:, q])))} for q, m in enumerate(sets)]
        involved = sorted(set().union(*sets))
        for comp in _merge(sets):
            worst = 100 * float(np.sqrt(max(share[k] for k in comp)))
            mine = [q for q, m in enumerate(sets) if m & set(comp)]
            groups.append(_group([cand[k] for k in comp], null[np.ix_(comp, mine)], worst))
        cand = [j for k, j in enumerate(cand) if k not in involved]
    return Verdict(cand, groups)


def combination_rows(group: Group, scale: np.ndarray) -> np.ndarray:
    """The determined combinations in physical units, one row each, in reduced row echelon form (each
    row 1 on its own leading coordinate): row . x_group is what the data fixes."""
    m = group.combos.T / scale[list(group.members)][None, :]
    m = m.copy()
    rows, cols = m.shape
    r = 0
    for c in range(cols):
        if r == rows:
            break
        pivot = r + int(np.argmax(np.abs(m[r:, c]) * scale[group.members[c]]))
        if abs(m[pivot, c]) * scale[group.members[c]] < 1e-9:
            continue
        m[[r, pivot]] = m[[pivot, r]]
        m[r] /= m[r, c]
        for k in range(rows):
            if k != r:
                m[k] -= m[k, c] * m[r]
        r += 1
    m[np.abs(m) * scale[list(group.members)][None, :] < 1e-9] = 0.0
    return m
