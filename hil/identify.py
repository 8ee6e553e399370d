"""Parameter identification from bench logs: one joint, bounded least-squares fit over several logs.

Steps: filter and stack the logs (regressor.rows); build the exact rim-force model in fit coordinates
(regressor.force_model); decide from the whole scaled regressor which coordinates the logs determine
(identifiability.classify); solve with scipy's bounded trust-region least squares, each held group
moving only along the combinations the data determines; standard errors from the HAC sandwich
(covariance.hac). What is written: only coordinates that were fitted, inside the model's ranges.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from kinetab.generator.vehicle import Vehicle
from scipy.optimize import least_squares

from . import benchdata, covariance, identifiability, regressor
from . import fitparams as fp
from .benchdata import BenchLog
from .identifiability import Group, Verdict


@dataclass(frozen=True)
class Estimate:
    """One fitted quantity, SI: model value, estimate, HAC standard error, and the bound it ended on."""

    model: float
    estimate: float
    se: float
    at_bound: str | None = None


@dataclass(frozen=True)
class Combination:
    """A determined combination of held coordinates: sum(coef * x), SI, with the model's value."""

    terms: tuple[tuple[float, str], ...]
    model: float
    estimate: float
    se: float


@dataclass(frozen=True)
class Held:
    """Coordinates left at the model's values, why, and what the data determines of them instead."""

    names: tuple[str, ...]
    why: str
    combinations: tuple[Combination, ...] = ()


@dataclass(frozen=True)
class Fit:
    """The outcome: the vehicle to write (held coordinates at the model's values), the estimates of
    the fitted coordinates (and derived model keys), what was held and why."""

    vehicle: Vehicle
    original: Vehicle  # the model as given
    estimates: dict[str, Estimate]
    held: list[Held]
    condition: float
    rms_before_n: float
    rms_after_n: float
    how: list[str]
    noise_n: float  # standard deviation of the residual rim force, N
    noise_a: float  # the measured current's noise (compare's noise floor, mean over the logs), A
    free: tuple[str, ...]  # the fitted coordinates
    imprecise: dict[str, float]  # fitted but not written: relative standard error above REL_TOL (_relative)
    measured_rel: dict[str, float]  # every fitted coordinate's relative standard error from the logs alone
    gram: np.ndarray  # X^T X of the scaled regressor of every coordinate, where the fit landed
    omega: np.ndarray  # the HAC long-run covariance of its scores
    groups: list[Group]
    refit_held: tuple[str, ...] = ()  # fitted but not written: the written values come from a refit holding these


@dataclass(frozen=True)
class _Map:
    """x(p) = x0 + T p: the free coordinates directly, each held group along its determined combinations."""

    x0: np.ndarray
    t: np.ndarray  # (11, n_p)
    free: list[int]

    def x(self, p: np.ndarray) -> np.ndarray:
        return np.asarray(self.x0 + self.t @ p)


def _map(x0: np.ndarray, scale: np.ndarray, verdict: Verdict) -> _Map:
    cols = []
    for j in verdict.free:
        e = np.zeros(len(x0))
        e[j] = 1.0
        cols.append(e)
    for g in verdict.groups:
        for k in range(g.combos.shape[1]):
            e = np.zeros(len(x0))
            e[list(g.members)] = scale[list(g.members)] * g.combos[:, k]
            cols.append(e)
    t = np.column_stack(cols) if cols else np.zeros((len(x0), 0))
    return _Map(x0, t, verdict.free)


def _settings(logs: list[BenchLog]) -> tuple[int, int]:
    return covariance.settings(min(regressor.window(log)[1] for log in logs))


def _omega(j: np.ndarray, r: np.ndarray, data: regressor.Rows, logs: list[BenchLog]) -> np.ndarray:
    block, lags = _settings(logs)
    scores = covariance.block_scores(j, r, group=data.log, time=data.sample, block=block)
    return covariance.long_run(scores, lags)


def _verdict(
    fm: regressor.ForceModel, x: np.ndarray, scale: np.ndarray, logs: list[BenchLog], *, lo: np.ndarray, hi: np.ndarray
) -> Verdict:
    """Classify at x, with the noise the tolerance is tied to taken from the residual of the best fit of
    every coordinate (bounded). Without a known force that fit is degenerate: scaling every force and
    both efficiencies down fits any log, and drives the motoring efficiency to its lower bound. Then the
    noise comes from a fit with the motoring efficiency held instead (it fixes the scale)."""
    x = np.clip(x, lo, hi)  # where a held group's combination moved it past a bound
    everything = _Map(x, np.eye(len(x)), list(range(len(x))))
    p = _solve(fm, everything, lo=lo, hi=hi, scale=scale)
    at = everything.x(p)
    eff = fp.INDEX["drive.efficiency"]
    if at[eff] <= lo[eff] * 1.2:
        others = [j for j in range(len(x)) if j != eff]
        scaled = _Map(x, np.eye(len(x))[:, others], others)
        at = scaled.x(_solve(fm, scaled, lo=lo, hi=hi, scale=scale))
    js = fm.jacobian(at) * scale
    return identifiability.classify(js.T @ js, _omega(js, fm.residual(at), fm.data, logs))


def _solve(fm: regressor.ForceModel, m: _Map, *, lo: np.ndarray, hi: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """The bounded least-squares solution in p (free coordinates bounded, combinations not)."""
    n_free = len(m.free)
    if m.t.shape[1] == 0:
        return np.zeros(0)
    low = np.concatenate([lo[m.free] - m.x0[m.free], np.full(m.t.shape[1] - n_free, -np.inf)])
    high = np.concatenate([hi[m.free] - m.x0[m.free], np.full(m.t.shape[1] - n_free, np.inf)])
    x_scale = np.concatenate([scale[m.free], np.ones(m.t.shape[1] - n_free)])
    result = least_squares(
        lambda p: fm.residual(m.x(p)),
        np.clip(np.zeros(m.t.shape[1]), low, high),  # a held group may have moved a start past a bound
        jac=lambda p: fm.jacobian(m.x(p)) @ m.t,
        bounds=(low, high),
        x_scale=x_scale,
        method="trf",
        xtol=1e-10,
        ftol=1e-12,
        gtol=1e-10,
        max_nfev=200,
    )
    return np.asarray(result.x)


HELD_SPREAD = 0.25
"""Held coordinates are taken as good to 25 % of their size (one standard deviation; `bench fit
--held-spread`): an assumption, not a measurement, since the logs cannot check them; what a held value
would pull the fitted ones by is added to their covariance (zero where holding it cannot bias them).
Friction, rolling resistance and inertia from handbooks or CAD are seldom better (common practice).
Regression (a trial, truths 10-30 % off in every coordinate, 48 short campaigns): at 10 %, 12 % of
estimates were more than 2 sigma off, masses and efficiencies up to 4.7 sigma, all pulled by held ones."""


def fit(v: Vehicle, logs: list[BenchLog], *, held_spread: float = HELD_SPREAD) -> Fit:
    """The joint fit over the logs (see the module docstring); `held_spread`: how far off the held
    values are taken to be, a fraction of each."""
    data = regressor.rows(v, logs)
    fm = regressor.force_model(v, data)
    x0, (lo, hi) = fm.x0, fp.bounds(v)
    scale = fp.scales(v, x0)
    verdict, m, p = _settled(fm, logs, scale, lo=lo, hi=hi)
    x = m.x(p)
    r = fm.residual(x)
    cov, measured = _covariances(fm, m, p, v=v, logs=logs, verdict=verdict, bounds=(lo, hi), held=held_spread)
    measured_rel = _relative(measured, verdict.free, fp.scales(v, x), fp.names(v))
    imprecise = {name: r for name, r in measured_rel.items() if not r <= identifiability.REL_TOL}
    held_x, refit, cov = _written_with_bars(
        fm, (x0, x), (cov, measured), free=verdict.free, imprecise=imprecise, bounds=(lo, hi), scale=scale
    )
    written = fp.vehicle_with(v, held_x)
    shown = _shown(x, held_x, [j for j in verdict.free if fp.names(v)[j] not in refit])
    estimates = _estimates(x0, shown, cov, free=verdict.free, lo=lo, hi=hi, names=fp.names(v), sizes=scale)
    imprecise |= _derived_imprecise(imprecise, estimates)
    held = [_held(g, x0, x, scale=scale, m=m, cov=cov, names=fp.names(v)) for g in verdict.groups]
    free_cols = fm.jacobian(x)[:, verdict.free] * scale[verdict.free]
    sv = np.linalg.svd(free_cols, compute_uv=False) if verdict.free else np.array([1.0])
    r_written = fm.residual(held_x)
    js_full = fm.jacobian(x) * scale
    return Fit(
        vehicle=written,
        original=v,
        estimates=estimates,
        held=held,
        condition=float(sv[0] / sv[-1]) if sv[-1] > 0 else float("inf"),
        rms_before_n=_rms(fm.residual(x0), data.weight),
        rms_after_n=_rms(r_written, data.weight),
        how=data.how,
        noise_n=float(np.std(r)),
        noise_a=float(np.mean([benchdata.noise_floor(log) for log in logs])),
        free=tuple(fp.names(v)[j] for j in verdict.free),
        imprecise=imprecise,
        measured_rel=measured_rel,
        gram=js_full.T @ js_full,
        omega=_omega(js_full, r, data, logs),
        groups=verdict.groups,
        refit_held=refit,
    )


def _written(
    fm: regressor.ForceModel,
    x0: np.ndarray,
    x: np.ndarray,
    scale: np.ndarray,
    *,
    free: list[int],
    imprecise: dict[str, float],
    bounds: tuple[np.ndarray, np.ndarray],
) -> tuple[np.ndarray, tuple[str, ...]]:
    """(the coordinates the file will hold, the fitted ones it does not get). Where some are not written,
    the others come from the fit again with only them free and the rest (held groups too) at the model's
    values: the values the file gets must fit the logs beside the values it keeps. (A trial wrote mass
    and Coulomb from the joint fit, where the efficiency had moved, beside the file's efficiency: compare
    RMS rose from 154 to 196 mA.)"""
    names = fp.names(fm.vehicle)
    kept = [j for j in free if names[j] in writable({names[j] for j in free}, imprecise)]
    refit = tuple(names[j] for j in free if j not in kept)
    if refit:
        m = _map(x0, scale, Verdict(free=kept, groups=[]))
        x = m.x(_solve(fm, m, lo=bounds[0], hi=bounds[1], scale=scale))
    return written_coordinates(x0, x, kept), refit


def _settled(
    fm: regressor.ForceModel, logs: list[BenchLog], scale: np.ndarray, *, lo: np.ndarray, hi: np.ndarray
) -> tuple[Verdict, _Map, np.ndarray]:
    """The classification, its map and the fit in it: classified at the model's values, then again where
    the fit landed (where the residual is the noise) until the classification stays (twice at most)."""
    x0 = fm.x0
    verdict = _verdict(fm, x0, scale, logs, lo=lo, hi=hi)
    m = _map(x0, scale, verdict)
    p = _solve(fm, m, lo=lo, hi=hi, scale=scale)
    for _ in range(2):
        again = _verdict(fm, m.x(p), scale, logs, lo=lo, hi=hi)
        if again.free == verdict.free and [g.members for g in again.groups] == [g.members for g in verdict.groups]:
            break
        verdict = again
        m = _map(x0, scale, verdict)
        p = _solve(fm, m, lo=lo, hi=hi, scale=scale)
    return verdict, m, p


def _shown(x: np.ndarray, written: np.ndarray, kept: list[int]) -> np.ndarray:
    """The coordinates the report prints: the values the file gets where it gets them (a refit's, where
    there is one), the joint estimates elsewhere."""
    out = x.copy()
    out[kept] = written[kept]
    return out


def _written_with_bars(
    fm: regressor.ForceModel,
    xs: tuple[np.ndarray, np.ndarray],
    covs: tuple[np.ndarray, np.ndarray],
    *,
    free: list[int],
    imprecise: dict[str, float],
    bounds: tuple[np.ndarray, np.ndarray],
    scale: np.ndarray,
) -> tuple[np.ndarray, tuple[str, ...], np.ndarray]:
    """_written, with the covariance (whole, measured; in the fit's coordinates) of what the file gets.
    A refit's written value sits where holding the unwritten coordinates (and the held groups) at the
    model's values put it, away from the joint estimate, the best the logs give; that shift is counted
    as an error of the written value, in quadrature with the joint standard error. A written value whose
    measured error then passes REL_TOL of its size joins `imprecise` (updated here) and the refit is
    made again. (A trial printed viscous friction from the joint fit, +-2.6 %, and wrote the refit's,
    50 % off its truth: the refit had held the breakaway excess at the model's value.)"""
    (x0, x), (cov, measured), names = xs, covs, fp.names(fm.vehicle)
    pos = {j: k for k, j in enumerate(free)}
    sizes = fp.scales(fm.vehicle, x)
    for _ in range(len(free) + 1):
        held_x, refit = _written(fm, x0, x, scale, free=free, imprecise=imprecise, bounds=bounds)
        if not refit:
            return held_x, refit, cov
        kept = [j for j in free if names[j] not in refit]
        honest = cov.copy()
        for j in kept:
            honest[pos[j], pos[j]] += (held_x[j] - x[j]) ** 2
        rel = {
            names[j]: float(np.hypot(np.sqrt(max(measured[pos[j], pos[j]], 0.0)), held_x[j] - x[j]) / sizes[j])
            for j in kept
        }
        newly = {n: r for n, r in rel.items() if not r <= identifiability.REL_TOL}
        if not newly:
            return held_x, refit, honest
        imprecise |= newly
    return held_x, refit, honest


def writable(free: set[str], imprecise: dict[str, float]) -> set[str]:
    """The fitted coordinates the file gets: precise enough, and (the excess of breakaway over Coulomb)
    with the coordinate they are written through (written_coordinates); the Stribeck speed only with the
    excess whose decay it is (fitted against a held excess, it absorbs that guess's error: a trial found
    it 3 standard errors off its truth)."""
    out = {name for name in free if name not in imprecise}
    if "friction.coulomb" not in out:
        out.discard("friction.breakaway_excess")
    if "friction.breakaway_excess" not in out:
        out.discard("friction.stribeck_speed")
    return out


def _relative(cov: np.ndarray, free: list[int], scale: np.ndarray, names: tuple[str, ...]) -> dict[str, float]:
    """Each fitted coordinate's measured standard error over its size (the sandwich plus the filter's
    spread, which the regressor alone does not show; `cov` without the held values' assumed spread,
    which is the same whatever the logs). Those above REL_TOL are imprecise: they stay in the fit
    (holding them at a wrong value would bias the rest) but are not written, as a held group's
    determined combination is not. What the held values may be off by is not counted here (with the
    efficiency held, every force would be +-10 %: no fit without a payload log could write anything);
    the report says which written values rest on held ones (fitreport._note)."""
    return {names[j]: float(np.sqrt(max(cov[k, k], 0.0))) / scale[j] for k, j in enumerate(free)}


def _covariances(
    fm: regressor.ForceModel,
    m: _Map,
    p: np.ndarray,
    *,
    v: Vehicle,
    logs: list[BenchLog],
    verdict: Verdict,
    bounds: tuple[np.ndarray, np.ndarray],
    held: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Covariance of p: whole (the HAC sandwich, the filter's spread and the held values' assumed
    spread, `held` of each), and what the logs themselves measure (without the held values' part)."""
    lo, hi = bounds
    x = m.x(p)
    jp = fm.jacobian(x) @ m.t
    if not jp.size:
        return jp, jp
    block, lags = _settings(logs)
    hac = covariance.hac(jp, fm.residual(x), group=fm.data.log, time=fm.data.sample, block=block, lags=lags)
    measured = hac + _filter_spread(v, logs, m, p, lo=lo, hi=hi, main=fm)
    return measured + _held_spread(jp, fm.jacobian(x), fp.scales(v, m.x0), verdict) * held**2, measured


DERIVED_FROM = {
    "friction.breakaway": ("friction.coulomb", "friction.breakaway_excess"),
    "drive.backdrive_efficiency": ("drive.backdrive_factor",),
}
"""The derived estimates (_estimates) and the fit coordinates they are made of."""


def _derived_imprecise(imprecise: dict[str, float], estimates: dict[str, Estimate]) -> dict[str, float]:
    """A derived estimate is as imprecise as the least precise coordinate it is made of."""
    out = {}
    for name, parts in DERIVED_FROM.items():
        worst = [imprecise[p] for p in parts if p in imprecise]
        if name in estimates and worst:
            out[name] = max(worst)
    return out


def written_names(f: Fit) -> set[str]:
    """The fit coordinates whose values the model file gets (writable)."""
    return writable(set(f.free), f.imprecise)


def kept_breakaway(f: Fit) -> float | None:
    """Where Coulomb is written but not the breakaway excess: the model's breakaway force stays (the logs
    did not tell it), raised to the new Coulomb force if that is higher (breakaway >= coulomb), N; None
    where breakaway is written from its estimate or not at all."""
    written = written_names(f)
    if "friction.coulomb" not in written or "friction.breakaway_excess" in written:
        return None
    return max(f.original.friction.breakaway_n, f.vehicle.friction.coulomb_n)


def _rms(residual: np.ndarray, weight: np.ndarray) -> float:
    """RMS over the rows the fit uses (the others carry a residual of 0)."""
    return float(np.sqrt(np.sum(residual**2) / max(float(np.sum(weight)), 1.0)))


def _filter_spread(
    v: Vehicle,
    logs: list[BenchLog],
    m: _Map,
    p: np.ndarray,
    *,
    lo: np.ndarray,
    hi: np.ndarray,
    main: regressor.ForceModel,
) -> np.ndarray:
    """Covariance (in p) of the systematic error the filter leaves (nonlinear terms filtered, quantised
    speeds differentiated, rows left out near a change of power flow): the same fit with each cutoff of
    regressor.OTHER_CUTOFFS_HZ moves the estimates by d; the mean of d d^T is added (the choice of cutoff
    within 10-20 Hz is arbitrary; what it changes is not known any better). A coordinate the other
    cutoff's rows barely see (_unseen) is pinned in that fit and moves by 0: its shift there would be
    the solver wandering, not the filter's error (a trial's back-driving factor went to its bound at
    20 Hz, whose rows left almost no back-driven force, and was reported +-900 %)."""
    out = np.zeros((len(p), len(p)))
    x = m.x(p)
    for cutoff in regressor.OTHER_CUTOFFS_HZ:
        other = regressor.force_model(v, regressor.rows(v, logs, cutoff_hz=cutoff))
        low, high = lo.copy(), hi.copy()
        for j in _unseen(main, other, x, m.free):
            low[j], high[j] = x[j] - PIN * abs(x[j] or 1.0), x[j] + PIN * abs(x[j] or 1.0)
        d = _solve(other, m, lo=low, hi=high, scale=fp.scales(v, m.x0)) - p
        out += np.outer(d, d) / len(regressor.OTHER_CUTOFFS_HZ)
    return out


PIN = 1e-12
"""Half-width of the bounds that pin a coordinate in a filter-variant fit, relative to its value."""
UNSEEN = 0.25
"""A filter variant whose rows carry less than this share of the main fit's information on a coordinate
(mean squared Jacobian column per used row) does not measure it."""


def _unseen(main: regressor.ForceModel, other: regressor.ForceModel, x: np.ndarray, free: list[int]) -> list[int]:
    """The free coordinates the other filter's rows carry (almost) no information on."""

    def info(fm: regressor.ForceModel) -> np.ndarray:
        j = fm.jacobian(x)
        return np.asarray((j**2).sum(axis=0) / max(float(fm.data.weight.sum()), 1.0))

    mine, theirs = info(main), info(other)
    return [j for j in free if mine[j] > 0 and theirs[j] < UNSEEN * mine[j]]


def _held_spread(jp: np.ndarray, j: np.ndarray, scale: np.ndarray, verdict: Verdict) -> np.ndarray:
    """Covariance in the fit's coordinates p per unit of the held directions' assumed relative
    uncertainty: S S^T with S = d(p)/d(held direction) = -pinv(Jp) J_held (scaled held directions)."""
    dirs = []
    for g in verdict.groups:
        members = list(g.members)
        u = np.linalg.svd(g.combos, full_matrices=True)[0] if g.combos.size else np.eye(len(members))
        null = u[:, g.combos.shape[1] :]
        for k in range(null.shape[1]):
            e = np.zeros(j.shape[1])
            e[members] = scale[members] * null[:, k]
            dirs.append(e)
    if not dirs:
        return np.zeros((jp.shape[1], jp.shape[1]))
    sens = np.linalg.lstsq(jp, j @ np.column_stack(dirs), rcond=None)[0]
    return np.asarray(sens @ sens.T)


def _estimates(
    x0: np.ndarray,
    x: np.ndarray,
    cov: np.ndarray,
    *,
    free: list[int],
    lo: np.ndarray,
    hi: np.ndarray,
    names: tuple[str, ...],
    sizes: np.ndarray,
) -> dict[str, Estimate]:
    """Each fitted coordinate, plus the model keys derived from them (breakaway, back-driving efficiency).
    On a bound means within a millionth of the coordinate's typical size (`sizes`, fp.scales) of it: not
    of the bounds' span, which for the reflected inertia (a 1 kg m^2 rotor through the gearbox) can be
    10^5 times the value (a trial flagged 0.60 kg as on its bound at 0.22 kg)."""
    out: dict[str, Estimate] = {}
    pos = {j: k for k, j in enumerate(free)}
    for j in free:
        se = float(np.sqrt(max(cov[pos[j], pos[j]], 0.0)))
        tol = 1e-6 * max(float(sizes[j]), 1e-12)
        bound = fp.BOUND_TEXT[names[j]] if (x[j] - lo[j] <= tol or hi[j] - x[j] <= tol) else None
        out[names[j]] = Estimate(model=float(x0[j]), estimate=float(x[j]), se=se, at_bound=bound)
    c, e = fp.INDEX["friction.coulomb"], fp.INDEX["friction.breakaway_excess"]
    if c in pos and e in pos:
        var = cov[pos[c], pos[c]] + cov[pos[e], pos[e]] + 2 * cov[pos[c], pos[e]]
        out["friction.breakaway"] = Estimate(
            model=float(x0[c] + x0[e]), estimate=float(x[c] + x[e]), se=float(np.sqrt(max(var, 0)))
        )
    b = fp.INDEX["drive.backdrive_factor"]
    if b in pos:
        k = out["drive.backdrive_factor"]
        out["drive.backdrive_efficiency"] = Estimate(
            model=1 / k.model, estimate=1 / k.estimate, se=k.se / k.estimate**2, at_bound=k.at_bound
        )
    return out


def _held(
    g: Group, x0: np.ndarray, x: np.ndarray, *, scale: np.ndarray, m: _Map, cov: np.ndarray, names: tuple[str, ...]
) -> Held:
    coordinates = names
    names = tuple(coordinates[j] for j in g.members)
    if g.why == "scale":
        return Held(names, "scale")
    rows = identifiability.combination_rows(g, scale)
    members = list(g.members)
    combos = []
    for row in rows:
        # the combination's change is row . (scale * combos z): its variance from the z block of cov
        start = len(m.free) + _offset(m, g)
        k = g.combos.shape[1]
        lin = row @ (scale[members][:, None] * g.combos)
        var = float(lin @ cov[start : start + k, start : start + k] @ lin) if k else 0.0
        terms = tuple((float(c), coordinates[j]) for c, j in zip(row, members) if c != 0)
        combos.append(
            Combination(
                terms=terms,
                model=float(row @ x0[members]),
                estimate=float(row @ x[members]),
                se=float(np.sqrt(max(var, 0))),
            )
        )
    return Held(names, g.why, tuple(combos))


def _offset(m: _Map, g: Group) -> int:
    """Where group g's combination coordinates start after the free ones in p."""
    members = set(g.members)
    for k in range(len(m.free), m.t.shape[1]):
        if any(m.t[j, k] != 0 for j in members):
            return k - len(m.free)
    return 0


def written_coordinates(x0: np.ndarray, x: np.ndarray, free: list[int]) -> np.ndarray:
    """The coordinates the written model file will hold: fitted ones, the rest as the file says. Where
    the mass is fitted but not the yaw inertia, the file's gyration radius is kept; where Coulomb is not
    fitted, breakaway (= Coulomb + excess) is not either."""
    i = fp.INDEX
    out = x0.copy()
    out[free] = x[free]
    if i["body.mass"] in free and i["body.yaw_inertia"] not in free:
        out[i["body.yaw_inertia"]] = x0[i["body.yaw_inertia"]] * out[i["body.mass"]] / x0[i["body.mass"]]
    if i["friction.coulomb"] not in free:
        out[i["friction.breakaway_excess"]] = x0[i["friction.breakaway_excess"]]
    return out


WRITTEN = {
    "body.mass": ("body.mass",),
    "body.yaw_inertia": ("body.gyration_radius",),
    "reflected_inertia": ("drive.rotor_inertia",),
    "friction.coulomb": ("friction.coulomb", "friction.breakaway"),
    "friction.breakaway_excess": ("friction.breakaway",),
    "friction.viscous": ("friction.viscous",),
    "wheels.rolling_resistance": ("wheels.rolling_resistance",),
    "casters.rolling_resistance": ("casters.rolling_resistance",),
    "skid.lateral_friction": ("skid.lateral_friction",),
    "drive.efficiency": ("drive.efficiency",),
    "drive.backdrive_factor": ("drive.backdrive_efficiency",),
    "friction.stribeck_speed": ("friction.stribeck_speed",),
}
"""Fit coordinate -> the model keys that change when it is fitted."""


def _ground_values(v: Vehicle) -> dict[str, float]:
    """The model key of the fit's ground coordinate (fitparams.GROUND) and its value."""
    if v.skid is not None:
        return {"skid.lateral_friction": v.skid.lateral_friction}
    assert v.casters is not None
    return {"casters.rolling_resistance": v.casters.rolling_resistance}


def model_changes(f: Fit) -> dict[str, float]:
    """The model keys to write (SI) for the fitted coordinates: the reflected inertia as the rotor
    inertia that gives it (the wheel inertia kept), the yaw inertia as the gyration radius."""
    v = f.vehicle
    value = {
        "body.mass": v.body.mass_kg,
        "body.gyration_radius": v.body.gyration_radius_m,
        "drive.rotor_inertia": v.drive.rotor_inertia_kgm2,
        "friction.coulomb": v.friction.coulomb_n,
        "friction.breakaway": v.friction.breakaway_n,
        "friction.viscous": v.friction.viscous_ns_per_m,
        "wheels.rolling_resistance": v.wheels.rolling_resistance,
        **_ground_values(v),
        "drive.efficiency": v.drive.efficiency,
        "drive.backdrive_efficiency": v.drive.backdrive_efficiency,
        "friction.stribeck_speed": v.friction.stribeck_speed_mps,
    }
    written = written_names(f)
    keys = [k for name in f.free if name in written for k in WRITTEN[name]]
    if "friction.coulomb" not in written:
        keys = [k for k in keys if k != "friction.breakaway"]
    kept = kept_breakaway(f)
    if kept is not None:
        value["friction.breakaway"] = kept
        if kept == f.original.friction.breakaway_n:  # unchanged: not a change to write
            keys = [k for k in keys if k != "friction.breakaway"]
    return {k: float(value[k]) for k in dict.fromkeys(keys)}
